"""Reading event logs: JSON Lines, plain or gzip (known by its magic bytes), ``-`` for stdin."""

from __future__ import annotations

import gzip
import io
import sys
from collections.abc import Iterator, Sequence
from contextlib import ExitStack
from pathlib import Path
from typing import BinaryIO

from windvane.errors import UsageError

_GZIP_MAGIC = b"\x1f\x8b"


class LogUnreadable(UsageError):
    """A log could not be opened, or not read to its end (a cut gzip, a failing disk).

    ``line`` is the last line read whole, so that a replay can apply everything before
    the fault and say exactly where it stopped.
    """

    def __init__(self, path: str, line: int, reason: str) -> None:
        self.path = path
        self.line = line
        where = f"past line {line}" if line else "from its first line"
        super().__init__(f"cannot read log {path} {where}: {reason}")


def check_logs(paths: Sequence[str]) -> None:
    """Open and close each log, so that a mistyped name stops a replay before it applies
    anything rather than after the logs before it."""
    for path in paths:
        if path != "-":
            _open(path).close()


def _open(path: str) -> io.BufferedReader:
    try:
        return Path(path).open("rb")
    except OSError as exc:
        raise UsageError(f"cannot read log {path}: {exc.strerror}") from None


def read_lines(path: str, after_line: int = 0) -> Iterator[tuple[int, bytes]]:
    """(line number, line without its newline) for each non-blank line of the log.

    With ``after_line``, lines up to and including that one are passed over unread, for
    a replay that resumes where an earlier one stopped; a log that ends before it is a
    usage error, since it cannot be the log the earlier replay read.
    """
    with ExitStack() as stack:
        handle: BinaryIO
        if path == "-":
            handle = sys.stdin.buffer
        else:
            raw = stack.enter_context(_open(path))
            if raw.peek(2)[:2] == _GZIP_MAGIC:
                handle = stack.enter_context(gzip.GzipFile(fileobj=raw, mode="rb"))
            else:
                handle = raw
        number = 0
        try:
            lines = enumerate(handle, start=1)
            if after_line > 0:
                for number, _ in lines:
                    if number == after_line:
                        break
                else:
                    raise UsageError(
                        f"cannot resume {path} after line {after_line}: "
                        f"the log has only {number} lines"
                    )
            for number, line in lines:
                line = line.rstrip(b"\r\n")
                if line.strip():
                    yield number, line
        except (OSError, EOFError) as exc:
            raise LogUnreadable(path, number, str(exc)) from None
