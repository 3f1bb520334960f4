"""Every part that talks to Redis lets out only windvane's errors, never the client library's.

A caller (the CLI, the HTTP error mapping, a library user) handles ``StoreError`` and
``StoreUnavailable`` and nothing else, so a redis-py exception escaping any of these
would become a traceback or a 500. Each is called against a server this test started
and then stopped (connection refused), and against a key of the wrong type (a command
the server refuses).
"""

from __future__ import annotations

import asyncio
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pytest
import redis

import windvane
from tests.redis_server import RedisServer
from windvane.definitions.plan import Plan, load_plan
from windvane.engine import Engine
from windvane.errors import StoreError, StoreUnavailable, WindvaneError
from windvane.ingest.event_stream import (
    append,
    drop_consumer_groups,
    open_stream,
    read_statuses,
    shard_count,
)
from windvane.ingest.worker import IngestSettings, IngestWorker
from windvane.inputs.events import parse_event
from windvane.keys import INGEST_WORKERS_KEY, MODELS_KEY, SHARD_COUNT_KEY
from windvane.models.registry import Arm, ModelRegistry
from windvane.store import open_store
from windvane.store.async_store import AsyncStateStore
from windvane.store.generations import Generations

FEATUREDEFS = Path(windvane.__file__).parents[2] / "featuredefs"
EVENT = parse_event({"kind": "request", "ts": 1_700_000_000, "id": "a1", "user": "u1"})


@pytest.fixture(scope="module")
def stopped_url() -> Iterator[str]:
    """The URL of a redis-server this module started and stopped again."""
    server = RedisServer().start()
    url = server.url
    server.stop()
    try:
        yield url
    finally:
        server.cleanup()


def calls(url: str) -> dict[str, Callable[[], Any]]:
    """Each public operation that reaches Redis, ready to call against ``url``."""
    store = open_store(url, timeout_s=0.5)
    engine = Engine(_plan(), store)
    stream = open_stream(url, timeout_s=0.5)
    registry = ModelRegistry(store, {})
    generations = Generations(store)
    worker = IngestWorker(engine, stream, IngestSettings(shards=(0,)))
    async_store = AsyncStateStore.open(url, timeout_s=0.5)
    return {
        "store.read": lambda: store.read([("HGETALL", "wv:main:{u:u1}")]),
        "store.flush": store.flush,
        "engine.apply": lambda: engine.apply([EVENT]),
        "engine.lookup": lambda: engine.lookup({"user": "u1", "app": "a"}),
        "generations.active": generations.active,
        "generations.list": generations.list,
        "generations.activate": lambda: generations.activate("main"),
        "generations.drop": lambda: generations.drop("old"),
        "registry.models": registry.models,
        "registry.active": lambda: registry.active("ctr"),
        "registry.activate": lambda: registry.activate("ctr", [Arm("v1", 1.0)], "test"),
        "shard_count": lambda: shard_count(stream),
        "append": lambda: append(stream, [(0, b"{}")]),
        "read_statuses": lambda: read_statuses(stream),
        "drop_consumer_groups": lambda: drop_consumer_groups(stream, "old"),
        "worker.step": worker.step,
        "worker.reserve": worker.reserve,
        "async_store.read": lambda: asyncio.run(async_store.read([("GET", "k")])),
        "async_store.ping": lambda: asyncio.run(async_store.ping()),
    }


def _plan() -> Plan:
    return load_plan(FEATUREDEFS)


def test_an_unreachable_server_raises_store_unavailable_everywhere(stopped_url: str) -> None:
    for name, call in calls(stopped_url).items():
        with pytest.raises(StoreUnavailable) as caught:
            call()
        assert stopped_url.split("//")[1].split("/")[0] in str(caught.value), name


def test_a_refused_command_raises_store_error(redis_server: RedisServer) -> None:
    client = redis.Redis.from_url(redis_server.url)
    client.flushdb()
    # Keys of the wrong type: the server refuses the commands that read them (WRONGTYPE).
    client.hset(MODELS_KEY, "x", "y")
    client.hset(SHARD_COUNT_KEY, "x", "y")
    client.hset(INGEST_WORKERS_KEY, "x", "y")
    store = open_store(redis_server.url)
    stream = open_stream(redis_server.url)
    refused = {
        "registry.models": ModelRegistry(store, {}).models,
        "shard_count": lambda: shard_count(stream),
        "read_statuses": lambda: read_statuses(stream),
        "drop_consumer_groups": lambda: drop_consumer_groups(stream, "old"),
    }
    try:
        for name, call in refused.items():
            with pytest.raises(StoreError) as caught:
                call()
            assert not isinstance(caught.value, StoreUnavailable), name
            assert isinstance(caught.value, WindvaneError)
    finally:
        client.flushdb()
        client.close()
        store.close()
        stream.close()
