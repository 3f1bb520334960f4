"""State store backends, chosen by URL (``store.url``).

- ``memory://`` (or ``memory://NAME``): an embedded store in this process (fakeredis),
  the default, for demos, tests and single-process runs. Stores with the same name in
  one process share their data.
- ``redis://host:port/db`` (``rediss://`` for TLS, ``unix:///path.sock``): a real server.

Every Redis error is turned into windvane's own (``store.redis_errors``) before it
leaves this package or the stream modules that use its clients.
"""

from __future__ import annotations

from windvane.store.base import StateStore
from windvane.store.clients import memory_server, redis_client
from windvane.store.redis_store import RedisStateStore
from windvane.store.url import StoreURL, parse_store_url

# The embedded store compiles the script on every call, so it gets many keys per call.
MEMORY_KEYS_PER_CALL = 1000


def open_store(url: str | StoreURL, timeout_s: float = 5.0) -> StateStore:
    """Open the store at ``url``; raises ``StoreError`` for a URL it cannot use."""
    parsed = parse_store_url(url)
    client = redis_client(parsed, timeout_s)
    if parsed.embedded:
        return RedisStateStore(
            client, parsed.text, keys_per_call=MEMORY_KEYS_PER_CALL, args_per_call=1_000_000
        )
    return RedisStateStore(client, parsed.text)


__all__ = ["StateStore", "StoreURL", "memory_server", "open_store", "parse_store_url"]
