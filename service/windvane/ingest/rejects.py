"""The rejects file: every line that could not be applied, with where it came from and why.

One JSON object per line: ``file``, ``line``, ``field`` (dotted path, empty when the
whole line is bad), ``reason`` and ``text`` (the original line), so a fixed line can
be cut out and replayed on its own.

A replay that stops part way keeps the records of exactly the lines it handled
(``savepoint`` and ``discard_after``), so that a resumed run appending to the same file
leaves one record per rejected line, none lost and none twice.
"""

from __future__ import annotations

import contextlib
import os
import stat
from dataclasses import dataclass
from pathlib import Path
from typing import BinaryIO

import orjson

from windvane.errors import UsageError, WindvaneError

MAX_TEXT_BYTES = 65_536


class RejectsUnwritable(WindvaneError):
    """The rejects file stopped taking records (a full disk, a device that refuses writes)."""


@dataclass(frozen=True)
class RejectsMark:
    """Where the file stood: ``offset`` is None for a device or pipe, which cannot be cut back."""

    offset: int | None
    count: int


class RejectsFile:
    """``append`` keeps what the file holds (a resumed replay); otherwise it is emptied."""

    def __init__(self, path: str | Path, append: bool = False) -> None:
        self.path = Path(path)
        self.count = 0
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise UsageError(
                f"cannot write rejects file {self.path}: "
                f"cannot make its directory {self.path.parent} ({exc.strerror})"
            ) from None
        try:
            # Created (or emptied) at once, so an old file never passes for this run's rejects.
            handle = self.path.open("ab" if append else "wb")
        except OSError as exc:
            raise UsageError(f"cannot write rejects file {self.path}: {exc.strerror}") from None
        self._handle: BinaryIO | None = handle
        try:
            self._regular = stat.S_ISREG(os.fstat(handle.fileno()).st_mode)
            self._probe(handle)
        except OSError as exc:
            with contextlib.suppress(OSError):
                handle.close()
            self._handle = None
            raise UsageError(f"cannot write rejects file {self.path}: {exc.strerror}") from None

    def _probe(self, handle: BinaryIO) -> None:
        """Find a full disk or a device that refuses writes before a replay applies anything.

        A regular file takes one byte, cut off again; anything else takes an empty write,
        which such a device refuses just the same.
        """
        if self._regular:
            size = handle.seek(0, os.SEEK_END)
            handle.write(b"\n")
            handle.flush()
            handle.truncate(size)
            handle.seek(size)
        else:
            os.write(handle.fileno(), b"")

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
        try:
            self._handle.write(orjson.dumps(record) + b"\n")
        except OSError as exc:
            raise self._unwritable(exc) from None
        self.count += 1

    def savepoint(self) -> RejectsMark:
        """Put every record written so far into the file; ``discard_after`` can return here."""
        if self._handle is None:
            raise ValueError("the rejects file is closed")
        try:
            self._handle.flush()
            offset = self._handle.tell() if self._regular else None
        except OSError as exc:
            raise self._unwritable(exc) from None
        return RejectsMark(offset, self.count)

    def discard_after(self, mark: RejectsMark) -> None:
        """Close the file holding only the records written up to ``mark``.

        For a replay that stopped: records of lines after the point it reports would come
        again when it is resumed. Records still buffered are dropped, not written (the
        disk may be full); a device or pipe keeps what it was given.
        """
        handle, self._handle = self._handle, None
        if handle is None:
            return
        if mark.offset is None:
            with contextlib.suppress(OSError):
                handle.close()
            return
        # Closing flushes what is buffered; the copy of the descriptor then cuts it off.
        keep = os.dup(handle.fileno())
        try:
            with contextlib.suppress(OSError):
                handle.close()
            os.ftruncate(keep, mark.offset)
        except OSError as exc:
            raise self._unwritable(exc) from None
        finally:
            os.close(keep)
        self.count = mark.count

    def _unwritable(self, exc: OSError) -> RejectsUnwritable:
        return RejectsUnwritable(f"cannot write rejects file {self.path}: {exc.strerror or exc}")

    def close(self) -> None:
        handle, self._handle = self._handle, None
        if handle is not None:
            try:
                handle.close()
            except OSError as exc:
                raise self._unwritable(exc) from None

    def __enter__(self) -> RejectsFile:
        return self

    def __exit__(self, kind: object, exc: object, tb: object) -> None:
        if exc is None:
            self.close()
        else:
            # Already failing: an error of the close would hide the one that matters.
            with contextlib.suppress(RejectsUnwritable):
                self.close()
