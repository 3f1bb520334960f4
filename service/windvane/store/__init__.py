"""State store backends, chosen by URL.

- ``memory://`` (or ``memory://NAME``): an embedded store in this process (fakeredis),
  the default, for demos, tests and single-process runs. Stores with the same name in
  one process share their data.
- ``redis://host:port/db`` (``rediss://`` for TLS, ``unix:///path.sock``): a real server.
"""

from __future__ import annotations

from urllib.parse import urlsplit

import fakeredis
import redis

from windvane.errors import StoreError
from windvane.store.base import StateStore
from windvane.store.redis_store import RedisStateStore

_MEMORY_SERVERS: dict[str, fakeredis.FakeServer] = {}
# The embedded store compiles the script on every call, so it gets many keys per call.
MEMORY_KEYS_PER_CALL = 1000


def memory_server(name: str) -> fakeredis.FakeServer:
    """The process-wide embedded server of that name, created on first use."""
    server = _MEMORY_SERVERS.get(name)
    if server is None:
        server = _MEMORY_SERVERS[name] = fakeredis.FakeServer()
    return server


def open_store(url: str, timeout_s: float = 5.0) -> StateStore:
    """Open the store at ``url``; raises ``StoreError`` for a URL it cannot use."""
    scheme = urlsplit(url).scheme
    if scheme == "memory":
        name = url[len("memory://") :].strip("/") or "default"
        client = fakeredis.FakeRedis(server=memory_server(name))
        return RedisStateStore(
            client, url, keys_per_call=MEMORY_KEYS_PER_CALL, args_per_call=1_000_000
        )
    if scheme in ("redis", "rediss", "unix"):
        try:
            client = redis.Redis.from_url(
                url, socket_timeout=timeout_s, socket_connect_timeout=timeout_s
            )
        except ValueError as exc:
            raise StoreError(f"cannot use store URL {url!r}: {exc}") from None
        return RedisStateStore(client, url)
    raise StoreError(f"cannot use store URL {url!r}: expected memory:// or redis://host:port/db")


__all__ = ["StateStore", "open_store"]
