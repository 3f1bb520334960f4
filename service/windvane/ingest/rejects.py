"""The rejects file: every line that could not be applied, with where it came from and why.

One JSON object per line: ``file``, ``line``, ``field`` (dotted path, empty when the
whole line is bad), ``reason`` and ``text`` (the original line), so a fixed line can
be cut out and replayed on its own.
"""

from __future__ import annotations

from pathlib import Path
from typing import BinaryIO

import orjson

MAX_TEXT_BYTES = 65_536


class RejectsFile:
    def __init__(self, path: str | Path) -> None:
        self.path = Path(path)
        self.count = 0
        # Created (and emptied) at once, so an old file never passes for this run's rejects.
        self.path.parent.mkdir(parents=True, exist_ok=True)
        self._handle: BinaryIO | None = self.path.open("wb")

    def write(self, file: str, line: int, field: str, reason: str, text: bytes) -> None:
        if self._handle is None:
            raise ValueError("the rejects file is closed")
        record = {
            "file": file,
            "line": line,
            "field": field,
            "reason": reason,
            "text": text[:MAX_TEXT_BYTES].decode("utf-8", errors="replace"),
        }
        self._handle.write(orjson.dumps(record) + b"\n")
        self.count += 1

    def close(self) -> None:
        if self._handle is not None:
            self._handle.close()
            self._handle = None

    def __enter__(self) -> RejectsFile:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
