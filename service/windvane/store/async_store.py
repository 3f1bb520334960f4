"""The asynchronous read side of a store, for the HTTP service's event loop.

Only reads: the lookup path runs its one pipeline here, while writes (replays,
publishing) use the synchronous store. A read has a deadline and nothing the store
does may hold its caller past it, whether the server hangs, is slow, restarts,
refuses connections or vanishes without closing them. So:

- the round trip runs as a task of its own and the caller waits for it only until the
  deadline; it never awaits the cancellation or the socket's close. Cancelling the
  client library in the middle of a command is not a way to keep a deadline: on
  Python 3.11 the ``asyncio.wait_for`` around its sends can swallow the cancellation,
  and the read after it then waits for the socket timeout (a second, not 5 ms);
- a connection whose read was abandoned is in an unknown state (its replies may still
  arrive), so it is closed in the background and never lent again;
- connections are opened in the background, at most two at a time and no sooner than
  ``RETRY_S`` after a failed attempt, so an outage neither piles connections up on
  the server nor puts a connect on the request path; at most ``max_connections`` are
  open, and at most ``max_waiters`` reads wait for one, the others fail at once.

It never retries: a retry would only spend the deadline. A store serves the event
loop it was first used on.
"""

from __future__ import annotations

import asyncio
import time
from collections import deque
from collections.abc import Coroutine, Sequence
from typing import Any

import redis.asyncio
from redis.asyncio.connection import AbstractConnection
from redis.exceptions import ResponseError

from windvane.errors import StoreError, StoreUnavailable
from windvane.store.clients import async_redis_client
from windvane.store.redis_errors import store_errors
from windvane.store.url import StoreURL, parse_store_url

MAX_CONNECTIONS = 32
MAX_WAITERS = 256
MAX_CONNECTING = 2
RETRY_S = 0.1


class AsyncStateStore:
    def __init__(
        self,
        client: redis.asyncio.Redis,
        url: str,
        timeout_s: float = 1.0,
        max_connections: int = MAX_CONNECTIONS,
        max_waiters: int = MAX_WAITERS,
    ) -> None:
        # The client makes connections and parses replies; its own pool is not used.
        self._client = client
        self.url = url
        self.timeout_s = timeout_s
        self.max_connections = max_connections
        self.max_waiters = max_waiters
        self._idle: list[AbstractConnection] = []
        self._waiters: deque[asyncio.Future[AbstractConnection]] = deque()
        self._open = 0  # connected and not discarded: idle or lent to a read
        self._connecting = 0
        self._retry_at = 0.0
        self._last_error = f"the store at {url} did not answer"
        self._tasks: set[asyncio.Task[Any]] = set()  # reads abandoned, connections opening
        self._closing: set[asyncio.Task[Any]] = set()  # never cancelled: a socket must close
        self._closed = False

    @classmethod
    def open(
        cls,
        url: str | StoreURL,
        timeout_s: float = 1.0,
        *,
        max_connections: int = MAX_CONNECTIONS,
        max_waiters: int = MAX_WAITERS,
    ) -> AsyncStateStore:
        parsed = parse_store_url(url)
        client = async_redis_client(parsed, timeout_s, retry=False)
        return cls(client, parsed.text, timeout_s, max_connections, max_waiters)

    @property
    def connections(self) -> int:
        """Connections open or being opened, for tests and health checks."""
        return self._open + self._connecting

    async def read(
        self, commands: Sequence[tuple[Any, ...]], timeout_s: float | None = None
    ) -> list[Any]:
        """The commands' replies in order, from one pipelined round trip within ``timeout_s``.

        Raises ``StoreUnavailable`` when the store has not answered by then (the
        default is the store's socket timeout) and ``StoreError`` when it refused a
        command.
        """
        limit_s = self.timeout_s if timeout_s is None else timeout_s
        loop = asyncio.get_running_loop()
        task = loop.create_task(self._exchange(commands))
        waiter = loop.create_future()

        def wake(_: object = None) -> None:
            if not waiter.done():
                waiter.set_result(None)

        task.add_done_callback(wake)
        timer = loop.call_later(limit_s, wake)
        try:
            await waiter
        except BaseException:  # the caller itself was cancelled
            timer.cancel()
            self._abandon(task)
            raise
        timer.cancel()
        if not task.done():
            self._abandon(task)
            raise StoreUnavailable(
                f"the store at {self.url} did not answer within {limit_s * 1000:.1f} ms"
            )
        return task.result()

    async def ping(self) -> bool:
        return bool((await self.read([("PING",)]))[0])

    async def close(self) -> None:
        self._closed = True
        self._fail_waiters(f"the store at {self.url} was closed")
        for task in list(self._tasks):
            task.cancel()
        while self._tasks or self._closing:
            await asyncio.gather(*self._tasks, *self._closing, return_exceptions=True)
        idle, self._idle = self._idle, []
        self._open -= len(idle)
        await asyncio.gather(*(c.disconnect(nowait=True) for c in idle), return_exceptions=True)
        await self._client.aclose()

    async def _exchange(self, commands: Sequence[tuple[Any, ...]]) -> list[Any]:
        connection = self._idle.pop() if self._idle else await self._connection()
        replies: list[Any] = []
        refused: ResponseError | None = None
        try:
            with store_errors(self.url):
                await connection.send_packed_command(
                    connection.pack_commands(commands), check_health=False
                )
                parse = self._client.parse_response
                for command in commands:
                    try:
                        replies.append(await parse(connection, command[0]))
                    except ResponseError as exc:
                        refused = refused or exc
                        replies.append(None)
        except StoreUnavailable:
            # The server closed or reset this connection: the idle ones are as stale.
            self._discard(connection)
            stale, self._idle = self._idle, []
            for other in stale:
                self._discard(other)
            raise
        except BaseException:
            self._discard(connection)
            raise
        task = asyncio.current_task()
        if task is not None and task.cancelling():
            self._discard(connection)  # abandoned, though the cancellation did not land
        else:
            self._release(connection)
        if refused is not None:
            with store_errors(self.url):
                raise refused
        return replies

    async def _connection(self) -> AbstractConnection:
        """An idle connection when one comes, or ``StoreUnavailable`` when none can."""
        if len(self._waiters) >= self.max_waiters:
            raise StoreUnavailable(
                f"the store at {self.url} is busy: {len(self._waiters)} reads wait for a connection"
            )
        self._grow()
        if not self._connecting and self._open == len(self._idle):
            raise StoreUnavailable(self._last_error)
        waiter: asyncio.Future[AbstractConnection] = asyncio.get_running_loop().create_future()
        self._waiters.append(waiter)
        try:
            return await waiter
        except asyncio.CancelledError:
            if waiter.done() and not waiter.cancelled():
                self._release(waiter.result())  # handed over just as this read was abandoned
            raise
        finally:
            if waiter in self._waiters:
                self._waiters.remove(waiter)

    def _grow(self) -> None:
        if (
            self._closed
            or self._connecting >= MAX_CONNECTING
            or self._open + self._connecting >= self.max_connections
            or time.monotonic() < self._retry_at
        ):
            return
        self._connecting += 1
        self._spawn(self._connect())

    async def _connect(self) -> None:
        connection = self._client.connection_pool.make_connection()
        try:
            with store_errors(self.url):
                await connection.connect()
        except BaseException as exc:
            self._connecting -= 1
            self._retry_at = time.monotonic() + RETRY_S
            self._last_error = (
                str(exc)
                if isinstance(exc, StoreError)
                else f"the store at {self.url} did not answer: {exc!r}"
            )
            self._close_later(connection)
            if not self._connecting and self._open == len(self._idle):
                self._fail_waiters(self._last_error)
            if isinstance(exc, asyncio.CancelledError):
                raise
            return
        self._connecting -= 1
        self._open += 1
        self._release(connection)
        if self._waiters:
            self._grow()

    def _release(self, connection: AbstractConnection) -> None:
        """Lend the connection to the first read waiting for one, or keep it idle."""
        while self._waiters:
            waiter = self._waiters.popleft()
            if not waiter.done():
                waiter.set_result(connection)
                return
        self._idle.append(connection)

    def _discard(self, connection: AbstractConnection) -> None:
        self._open -= 1
        self._close_later(connection)
        if self._waiters:
            self._grow()

    def _close_later(self, connection: AbstractConnection) -> None:
        if connection.is_connected:
            self._spawn(connection.disconnect(nowait=True), self._closing)

    def _abandon(self, task: asyncio.Task[Any]) -> None:
        """Cancel a read nobody waits for; its connection is discarded as it unwinds."""
        task.cancel()
        self._tasks.add(task)
        task.add_done_callback(self._forget)

    def _spawn(
        self, work: Coroutine[Any, Any, Any], tasks: set[asyncio.Task[Any]] | None = None
    ) -> None:
        task = asyncio.get_running_loop().create_task(work)
        (self._tasks if tasks is None else tasks).add(task)
        task.add_done_callback(self._forget)

    def _forget(self, task: asyncio.Task[Any]) -> None:
        self._tasks.discard(task)
        self._closing.discard(task)
        if not task.cancelled():
            task.exception()  # retrieved: an abandoned read's error has no one to go to

    def _fail_waiters(self, message: str) -> None:
        while self._waiters:
            waiter = self._waiters.popleft()
            if not waiter.done():
                waiter.set_exception(StoreUnavailable(message))
