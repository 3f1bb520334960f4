"""Turning redis-py's errors into windvane's, in one place for every store client."""

from __future__ import annotations

import redis


class store_errors:
    """Context manager: connection trouble becomes ``StoreUnavailable`` naming the store.

    A refused command becomes ``StoreError``. ``NoScriptError`` passes through, since
    the caller reloads the script and retries.
    """

    def __init__(self, url: str) -> None:
        self.url = url

    def __enter__(self) -> None:
        return None

    def __exit__(
        self, kind: type[BaseException] | None, exc: BaseException | None, tb: object
    ) -> bool:
        from windvane.errors import StoreError, StoreUnavailable

        if exc is None or isinstance(exc, redis.exceptions.NoScriptError):
            return False
        if isinstance(exc, redis.exceptions.ConnectionError | redis.exceptions.TimeoutError):
            raise StoreUnavailable(f"the store at {self.url} did not answer: {exc}") from None
        if isinstance(exc, redis.exceptions.ResponseError):
            raise StoreError(f"the store at {self.url} refused a command: {exc}") from None
        return False
