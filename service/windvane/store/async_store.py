"""The asynchronous read side of a store, for the HTTP service's event loop.

Only reads: the lookup path runs its one pipeline here, while writes (replays,
publishing) use the synchronous store. It never retries: a lookup has a deadline,
and a retry would only spend it.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any
from urllib.parse import urlsplit

import fakeredis
import redis.asyncio
from redis.asyncio.retry import Retry
from redis.backoff import NoBackoff

from windvane.errors import StoreError
from windvane.store import memory_server
from windvane.store.redis_errors import store_errors


class AsyncStateStore:
    def __init__(self, client: redis.asyncio.Redis, url: str) -> None:
        self.client = client
        self.url = url

    @classmethod
    def open(cls, url: str, timeout_s: float = 1.0) -> AsyncStateStore:
        scheme = urlsplit(url).scheme
        if scheme == "memory":
            name = url[len("memory://") :].strip("/") or "default"
            return cls(fakeredis.FakeAsyncRedis(server=memory_server(name)), url)
        if scheme in ("redis", "rediss", "unix"):
            client = redis.asyncio.Redis.from_url(
                url,
                socket_timeout=timeout_s,
                socket_connect_timeout=timeout_s,
                retry=Retry(NoBackoff(), 0),
            )
            return cls(client, url)
        raise StoreError(
            f"cannot use store URL {url!r}: expected memory:// or redis://host:port/db"
        )

    async def read(self, commands: Sequence[tuple[Any, ...]]) -> list[Any]:
        """Run the commands in one pipelined round trip; answers in order."""
        pipe = self.client.pipeline(transaction=False)
        for command in commands:
            pipe.execute_command(*command)
        with store_errors(self.url):
            return await pipe.execute()

    async def ping(self) -> bool:
        with store_errors(self.url):
            return bool(await self.client.ping())

    async def close(self) -> None:
        await self.client.aclose()
