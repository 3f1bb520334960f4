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

import hiredis
import redis

from windvane.errors import StoreError
from windvane.kinds.batch_writes import BatchWrites
from windvane.state.update_script import UPDATE_SCRIPT, UPDATE_SCRIPT_SHA
from windvane.store.base import PendingWrites, StateStore
from windvane.store.redis_errors import store_errors


class RedisStateStore(StateStore):
    """``keys_per_call`` and ``args_per_call`` bound one script call: a real server serves
    lookups between calls, so a call stays small (a few hundred microseconds of Lua at
    most); the embedded store pays a large fixed cost per call, so it takes many keys.
    """

    def __init__(
        self, client: redis.Redis, url: str, keys_per_call: int = 8, args_per_call: int = 500
    ) -> None:
        self.client = client
        self.url = url
        self.keys_per_call = keys_per_call
        self.args_per_call = args_per_call
        self._script_loaded = False

    def _load_script(self) -> None:
        with store_errors(self.url):
            sha = self.client.script_load(UPDATE_SCRIPT)
        if sha != UPDATE_SCRIPT_SHA:
            raise StoreError(f"{self.url}: the server hashed the update script differently")
        self._script_loaded = True

    def send(self, *batches: BatchWrites) -> PendingWrites:
        batches = tuple(writes for writes in batches if writes)
        if not batches:
            return _Done()
        if not self._script_loaded:
            self._load_script()
        chunks = self._pack(batches)
        pool = self.client.connection_pool
        with store_errors(self.url):
            connection = pool.get_connection()
            try:
                connection.send_packed_command([b"".join(chunks)])
            except BaseException:
                connection.disconnect()
                pool.release(connection)
                raise
        return _InFlight(self, connection, len(chunks), batches)

    def _pack(self, batches: Sequence[BatchWrites]) -> list[bytes]:
        """Every command of the batches, packed by hiredis.

        redis-py's pipeline would do the same with a Python loop over every argument,
        which costs more than the rest of the update path.
        """
        pack = hiredis.pack_command
        sha = UPDATE_SCRIPT_SHA
        chunks: list[bytes] = []
        keys: list[str] = []
        argv: list[str] = []
        for writes in batches:
            for key, args in writes.hash_updates():
                keys.append(key)
                argv += args
                if len(keys) >= self.keys_per_call or len(argv) >= self.args_per_call:
                    chunks.append(pack(("EVALSHA", sha, len(keys), *keys, *argv)))
                    keys, argv = [], []
        if keys:
            chunks.append(pack(("EVALSHA", sha, len(keys), *keys, *argv)))
        for writes in batches:
            for key, members, expire_at_ms in writes.member_updates():
                chunks.append(pack(("PFADD", key, *members)))
                chunks.append(pack(("PEXPIREAT", key, expire_at_ms, "NX")))
                chunks.append(pack(("PEXPIREAT", key, expire_at_ms, "GT")))
        return chunks

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


class _Done(PendingWrites):
    def wait(self) -> None:
        pass

    def abandon(self) -> None:
        pass


class _InFlight(PendingWrites):
    """One batch on the wire. The replies are read one by one, so that an error reply
    never leaves the connection out of step; after a server restart emptied the script
    cache (NOSCRIPT), the batch is sent again, which is safe because every command of a
    batch is either rejected whole or idempotent."""

    def __init__(
        self,
        store: RedisStateStore,
        connection: Any,
        replies: int,
        batches: tuple[BatchWrites, ...],
    ) -> None:
        self.store = store
        self.connection = connection
        self.replies = replies
        self.batches = batches

    def wait(self) -> None:
        store, connection = self.store, self.connection
        pool = store.client.connection_pool
        first_error: redis.exceptions.ResponseError | None = None
        with store_errors(store.url):
            try:
                for _ in range(self.replies):
                    try:
                        connection.read_response()
                    except redis.exceptions.ResponseError as exc:
                        first_error = first_error or exc
            except BaseException:
                connection.disconnect()
                raise
            finally:
                pool.release(connection)
            if isinstance(first_error, redis.exceptions.NoScriptError):
                store._load_script()
                store.send(*self.batches).wait()
            elif first_error is not None:
                raise first_error

    def abandon(self) -> None:
        self.connection.disconnect()
        self.store.client.connection_pool.release(self.connection)
