"""Turning redis-py's errors into windvane's, in one place for every Redis client.

Every module that talks to Redis (the state store, its async side, generations, the
model registry, the event stream and its workers) runs its commands inside
``store_errors``, so what leaves it is a ``StoreError`` (or ``StoreUnavailable``)
naming the server, never an exception of the client library.
"""

from __future__ import annotations

from typing import Any

import redis

from windvane.errors import StoreError, StoreUnavailable


def describe(client: Any) -> str:
    """The server a client talks to, as ``host:port/db`` or the socket path, for messages."""
    pool = getattr(client, "connection_pool", None)
    kwargs = getattr(pool, "connection_kwargs", {}) or {}
    if "path" in kwargs:
        return f"unix://{kwargs['path']}"
    if "host" in kwargs:
        return f"redis://{kwargs['host']}:{kwargs.get('port', 6379)}/{kwargs.get('db', 0)}"
    return "the embedded store"


class store_errors:
    """Context manager: connection trouble becomes ``StoreUnavailable`` naming the store.

    A refused command, or any other error of the client library, becomes
    ``StoreError``. ``NoScriptError`` passes through, since the caller reloads the
    script and retries.
    """

    def __init__(self, url: str) -> None:
        self.url = url

    def __enter__(self) -> None:
        return None

    def __exit__(
        self, kind: type[BaseException] | None, exc: BaseException | None, tb: object
    ) -> bool:
        if exc is None or isinstance(exc, redis.exceptions.NoScriptError):
            return False
        if isinstance(exc, redis.exceptions.ConnectionError | redis.exceptions.TimeoutError):
            raise StoreUnavailable(f"the store at {self.url} did not answer: {exc}") from None
        if isinstance(exc, redis.exceptions.ResponseError):
            raise StoreError(f"the store at {self.url} refused a command: {exc}") from None
        if isinstance(exc, redis.exceptions.RedisError):
            raise StoreError(f"the store at {self.url} failed: {exc}") from None
        return False


__all__ = ["describe", "store_errors"]
