from __future__ import annotations

import os
import uuid
from collections.abc import Iterator
from pathlib import Path

import pytest
from hypothesis import HealthCheck, settings

from tests.redis_server import RedisServer
from windvane.store import open_store

ROOT = Path(__file__).resolve().parent.parent
FEATUREDEFS = ROOT / "featuredefs"

# Reproducible examples in CI; a developer can widen the search with HYPOTHESIS_PROFILE=deep.
settings.register_profile(
    "ci",
    max_examples=25,
    deadline=None,
    derandomize=True,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
)
settings.register_profile(
    "deep",
    max_examples=300,
    deadline=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
)
settings.load_profile(os.environ.get("HYPOTHESIS_PROFILE", "ci"))


@pytest.fixture(scope="session")
def redis_server() -> Iterator[RedisServer]:
    """A redis-server started for this test session on a free loopback port."""
    server = RedisServer().start()
    try:
        yield server
    finally:
        server.cleanup()


@pytest.fixture(params=["memory", "redis"])
def store_url(request: pytest.FixtureRequest) -> Iterator[str]:
    """Each test using this runs on the embedded store and on a real redis-server."""
    if request.param == "memory":
        url = f"memory://test-{uuid.uuid4().hex}"
    else:
        url = request.getfixturevalue("redis_server").url
    store = open_store(url)
    store.flush()
    store.close()
    return url
