"""The lookup's read side keeps its deadline and its connections whatever the server does.

Each test starts its own redis-server and freezes it (SIGSTOP) or pauses its clients
(CLIENT PAUSE, a server that is up but slow). The hang guard (half a second against
deadlines of 5 to 50 ms) catches a read that waits for the socket timeout; how close
reads come to their deadline is the benchmark's business.
"""

from __future__ import annotations

import asyncio
import time
from collections.abc import Awaitable, Callable, Iterator
from typing import Any

import pytest
import redis

from tests.redis_server import RedisServer
from windvane.errors import StoreUnavailable
from windvane.store.async_store import AsyncStateStore

HANG_GUARD_S = 0.5


@pytest.fixture
def server() -> Iterator[RedisServer]:
    """A redis-server of this test's own, since the test freezes or pauses it."""
    server = RedisServer().start()
    try:
        yield server
    finally:
        server.cleanup()


async def outcome(store: AsyncStateStore, key: str, timeout_s: float) -> Any:
    """The read's replies or its error, after checking that it came within the hang guard."""
    started = time.monotonic()
    try:
        result: Any = await store.read([("GET", key)], timeout_s)
    except StoreUnavailable as exc:
        result = exc
    assert time.monotonic() - started < timeout_s + HANG_GUARD_S
    return result


async def eventually(check: Callable[[], Awaitable[bool]], timeout_s: float = 10) -> bool:
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if await check():
            return True
        await asyncio.sleep(0.02)
    return await check()


def test_a_frozen_server_costs_reads_their_deadline_and_few_connections(
    server: RedisServer,
) -> None:
    async def scenario() -> None:
        store = AsyncStateStore.open(server.url)
        try:
            assert await store.read([("SET", "k", "v"), ("GET", "k")], 1.0) == [True, b"v"]
            received = server.connections_received()
            with server.frozen():
                for _ in range(40):
                    assert isinstance(await outcome(store, "k", 0.005), StoreUnavailable)
                for _ in range(3):
                    reads = [outcome(store, "k", 0.02) for _ in range(20)]
                    for result in await asyncio.gather(*reads):
                        assert isinstance(result, StoreUnavailable)
                    assert store.connections <= store.max_connections

            async def answers() -> bool:
                return await outcome(store, "k", 0.05) == [b"v"]

            assert await eventually(answers)
            # One new connection per abandoned read would be a hundred.
            assert server.connections_received() - received <= 8
        finally:
            await store.close()

    asyncio.run(scenario())


def test_reads_beyond_the_waiting_limit_fail_at_once(server: RedisServer) -> None:
    async def scenario() -> None:
        store = AsyncStateStore.open(server.url, max_connections=2, max_waiters=4)
        try:
            assert await store.read([("SET", "k", "v")], 1.0) == [True]
            with server.frozen():
                results = await asyncio.gather(*(outcome(store, "k", 0.05) for _ in range(30)))
                assert all(isinstance(result, StoreUnavailable) for result in results)
                # Two reads hold the connections, four wait, the rest are turned away.
                busy = [result for result in results if "busy" in str(result)]
                assert len(busy) >= 30 - 4 - 2
                assert store.connections <= 2

            async def answers() -> bool:
                return await outcome(store, "k", 0.05) == [b"v"]

            assert await eventually(answers)
        finally:
            await store.close()

    asyncio.run(scenario())


def test_replies_to_an_abandoned_read_never_reach_another_read(server: RedisServer) -> None:
    """A paused server answers the abandoned GETs later; no later read may get those answers."""
    values = {f"k{i}": f"v{i}".encode() for i in range(40)}
    keys = list(values)

    async def scenario() -> None:
        store = AsyncStateStore.open(server.url)
        control = redis.Redis(host="127.0.0.1", port=server.port)
        try:
            await store.read([("MSET", *(x for pair in values.items() for x in pair))], 1.0)
            # Warm a few connections, so that abandoned ones could be lent again.
            warm = await asyncio.gather(*(store.read([("GET", k)], 1.0) for k in keys[:8]))
            assert warm == [[values[k]] for k in keys[:8]]
            control.client_pause(1000)  # the server holds every command for a second
            abandoned = await asyncio.gather(*(outcome(store, k, 0.005) for k in keys[:20]))
            assert all(isinstance(result, StoreUnavailable) for result in abandoned)

            async def answers() -> bool:
                return await outcome(store, keys[20], 0.05) == [values[keys[20]]]

            assert await eventually(answers)
            later = await asyncio.gather(*(outcome(store, k, 1.0) for k in keys[20:]))
            assert later == [[values[k]] for k in keys[20:]]
        finally:
            control.close()
            await store.close()

    asyncio.run(scenario())
