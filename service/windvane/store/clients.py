"""Redis clients for a store URL, made in one place for every part that talks to Redis.

The state store, its asynchronous read side, the event stream, the generations and
the model registry all reach Redis through a client made here, so a URL means the
same server, with the same timeouts, wherever it is given.
"""

from __future__ import annotations

import fakeredis
import redis
import redis.asyncio
from redis.asyncio.retry import Retry
from redis.backoff import NoBackoff

from windvane.errors import StoreError
from windvane.store.url import StoreURL

_MEMORY_SERVERS: dict[str, fakeredis.FakeServer] = {}


def memory_server(name: str) -> fakeredis.FakeServer:
    """The process-wide embedded server of that name, created on first use."""
    server = _MEMORY_SERVERS.get(name)
    if server is None:
        server = _MEMORY_SERVERS[name] = fakeredis.FakeServer()
    return server


def redis_client(url: StoreURL, timeout_s: float = 5.0) -> redis.Redis:
    """A blocking client; the embedded store's when the URL is ``memory://``."""
    if url.embedded:
        return fakeredis.FakeRedis(server=memory_server(url.memory_name))
    try:
        return redis.Redis.from_url(
            url.text, socket_timeout=timeout_s, socket_connect_timeout=timeout_s
        )
    except ValueError as exc:
        raise StoreError(f"cannot use store URL {url.text!r}: {exc}") from None


def async_redis_client(
    url: StoreURL, timeout_s: float = 1.0, *, retry: bool = True
) -> redis.asyncio.Redis:
    """An asyncio client; ``retry=False`` for reads under a deadline, which a retry would spend."""
    if url.embedded:
        return fakeredis.FakeAsyncRedis(server=memory_server(url.memory_name))
    options = {} if retry else {"retry": Retry(NoBackoff(), 0)}
    try:
        return redis.asyncio.Redis.from_url(
            url.text, socket_timeout=timeout_s, socket_connect_timeout=timeout_s, **options
        )
    except ValueError as exc:
        raise StoreError(f"cannot use store URL {url.text!r}: {exc}") from None
