"""The state store interface: one pipelined round trip to write a batch, one to read a lookup.

Backends differ only in how they reach a Redis-compatible server; the key layout,
the update script and the read commands are the same for all of them.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from collections.abc import Iterator, Sequence
from typing import Any

import redis

from windvane.kinds.batch_writes import BatchWrites


class PendingWrites(ABC):
    """Writes sent and not yet confirmed: ``wait`` reads the replies, raising the first error."""

    @abstractmethod
    def wait(self) -> None: ...

    @abstractmethod
    def abandon(self) -> None:
        """Give up on the replies (the caller is failing anyway); the connection is closed."""


class StateStore(ABC):
    """``client`` is the store's Redis connection, for the parts of this package (and the
    model registry) that keep keys of their own beside the feature state; they translate
    its errors with ``store_errors`` as this class does."""

    url: str
    client: redis.Redis

    def apply(self, *batches: BatchWrites) -> None:
        """Send every write of the batches in one pipelined round trip and wait for it."""
        self.send(*batches).wait()

    @abstractmethod
    def send(self, *batches: BatchWrites) -> PendingWrites:
        """Send the batches' writes in one pipelined write and return without waiting.

        A replay parses its next batch while the store works on this one, with no
        second thread: the writes are on the wire, the replies wait in the socket.
        """

    @abstractmethod
    def read(self, commands: Sequence[tuple[Any, ...]]) -> list[Any]:
        """Run read commands in one pipelined round trip; answers in order."""

    @abstractmethod
    def scan_keys(self, pattern: str) -> Iterator[str]:
        """Every key matching ``pattern``, incrementally (SCAN, never KEYS)."""

    @abstractmethod
    def dump_hash(self, key: str) -> dict[bytes, bytes]: ...

    @abstractmethod
    def key_type(self, key: str) -> str: ...

    @abstractmethod
    def expire_at_ms(self, key: str) -> int:
        """The key's expiry in epoch milliseconds, -1 without expiry, -2 when absent."""

    @abstractmethod
    def flush(self) -> None:
        """Delete every key in the store's database (tests and demos only)."""

    @abstractmethod
    def close(self) -> None: ...

    def __enter__(self) -> StateStore:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
