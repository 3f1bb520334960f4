"""The asynchronous read side of a store, for the HTTP service's event loop.

Only reads: the lookup path runs its one pipeline here, while writes (replays,
publishing) use the synchronous store. It never retries: a lookup has a deadline,
and a retry would only spend it.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

import redis.asyncio

from windvane.store.clients import async_redis_client
from windvane.store.redis_errors import store_errors
from windvane.store.url import StoreURL, parse_store_url


class AsyncStateStore:
    def __init__(self, client: redis.asyncio.Redis, url: str) -> None:
        self._client = client
        self.url = url

    @classmethod
    def open(cls, url: str | StoreURL, timeout_s: float = 1.0) -> AsyncStateStore:
        parsed = parse_store_url(url)
        return cls(async_redis_client(parsed, timeout_s, retry=False), parsed.text)

    async def read(self, commands: Sequence[tuple[Any, ...]]) -> list[Any]:
        """Run the commands in one pipelined round trip; answers in order."""
        pipe = self._client.pipeline(transaction=False)
        for command in commands:
            pipe.execute_command(*command)
        with store_errors(self.url):
            return await pipe.execute()

    async def ping(self) -> bool:
        with store_errors(self.url):
            return bool(await self._client.ping())

    async def close(self) -> None:
        await self._client.aclose()
