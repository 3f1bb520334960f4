"""The Redis backend, shared by the real server (``redis://``) and the embedded one (``memory://``).

Batches go out as one non-transactional pipeline of EVALSHA calls (one per hash key)
and PFADD/PEXPIREAT commands (per side key). The script is loaded once; when a server
restart has emptied its script cache, the batch is sent again after reloading, which
is safe because every command of a batch is either rejected whole (NOSCRIPT) or
idempotent (PFADD, PEXPIREAT).
"""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from typing import Any

import redis

from windvane.batch_writes import BatchWrites
from windvane.errors import StoreError
from windvane.store.base import StateStore
from windvane.store.reachability import store_errors
from windvane.update_script import UPDATE_SCRIPT, UPDATE_SCRIPT_SHA


class RedisStateStore(StateStore):
    """``keys_per_call`` bounds how long one script call holds the server: a real server
    serves lookups between calls, so it takes few keys per call; the embedded store pays
    a large fixed cost per call, so it takes many.
    """

    def __init__(self, client: redis.Redis, url: str, keys_per_call: int = 1) -> None:
        self.client = client
        self.url = url
        self.keys_per_call = keys_per_call
        self._script_loaded = False

    def _load_script(self) -> None:
        with store_errors(self.url):
            sha = self.client.script_load(UPDATE_SCRIPT)
        if sha != UPDATE_SCRIPT_SHA:
            raise StoreError(f"{self.url}: the server hashed the update script differently")
        self._script_loaded = True

    def apply(self, writes: BatchWrites) -> None:
        if not writes:
            return
        if not self._script_loaded:
            self._load_script()
        try:
            self._send(writes)
        except redis.exceptions.NoScriptError:
            self._load_script()
            self._send(writes)

    def _send(self, writes: BatchWrites) -> None:
        pipe = self.client.pipeline(transaction=False)
        keys: list[str] = []
        argv: list[str] = []
        for key, args in writes.hash_updates():
            keys.append(key)
            argv += args
            if len(keys) >= self.keys_per_call:
                pipe.evalsha(UPDATE_SCRIPT_SHA, len(keys), *keys, *argv)
                keys, argv = [], []
        if keys:
            pipe.evalsha(UPDATE_SCRIPT_SHA, len(keys), *keys, *argv)
        for key, members, expire_at_ms in writes.member_updates():
            pipe.pfadd(key, *members)
            pipe.pexpireat(key, expire_at_ms, nx=True)
            pipe.pexpireat(key, expire_at_ms, gt=True)
        with store_errors(self.url):
            pipe.execute()

    def read(self, commands: Sequence[tuple[Any, ...]]) -> list[Any]:
        pipe = self.client.pipeline(transaction=False)
        for command in commands:
            pipe.execute_command(*command)
        with store_errors(self.url):
            return pipe.execute()

    def scan_keys(self, pattern: str) -> Iterator[str]:
        with store_errors(self.url):
            for key in self.client.scan_iter(match=pattern, count=1000):
                yield key.decode() if isinstance(key, bytes) else key

    def dump_hash(self, key: str) -> dict[bytes, bytes]:
        with store_errors(self.url):
            return self.client.hgetall(key)

    def key_type(self, key: str) -> str:
        with store_errors(self.url):
            kind = self.client.type(key)
        return kind.decode() if isinstance(kind, bytes) else kind

    def expire_at_ms(self, key: str) -> int:
        with store_errors(self.url):
            return int(self.client.pexpiretime(key))

    def flush(self) -> None:
        with store_errors(self.url):
            self.client.flushdb()

    def close(self) -> None:
        self.client.close()
