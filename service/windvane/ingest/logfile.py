"""Reading event logs: JSON Lines, plain or gzip (known by its magic bytes), ``-`` for stdin."""

from __future__ import annotations

import gzip
import sys
from collections.abc import Iterator
from contextlib import ExitStack
from pathlib import Path
from typing import BinaryIO

from windvane.errors import UsageError

_GZIP_MAGIC = b"\x1f\x8b"


def read_lines(path: str) -> Iterator[tuple[int, bytes]]:
    """(line number, line without its newline) for each non-blank line of the log."""
    with ExitStack() as stack:
        handle: BinaryIO
        if path == "-":
            handle = sys.stdin.buffer
        else:
            try:
                raw = stack.enter_context(Path(path).open("rb"))
            except OSError as exc:
                raise UsageError(f"cannot read log {path}: {exc.strerror}") from None
            if raw.peek(2)[:2] == _GZIP_MAGIC:
                handle = stack.enter_context(gzip.GzipFile(fileobj=raw, mode="rb"))
            else:
                handle = raw
        number = 0
        try:
            for number, line in enumerate(handle, start=1):
                line = line.rstrip(b"\r\n")
                if line.strip():
                    yield number, line
        except (OSError, EOFError) as exc:
            raise UsageError(f"cannot read log {path} past line {number}: {exc}") from None
