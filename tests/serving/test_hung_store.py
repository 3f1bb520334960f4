"""Whatever the store does, a lookup answers by its deadline: frozen, killed, restarting.

A frozen server (SIGSTOP) keeps its connections open and answers nothing, as a hung
or half-open one would; a killed one refuses connections until it is started again on
the same port. Every lookup meanwhile must be a 200 within the default deadline plus a
generous 50 ms by the answer's own ``elapsed_ms``, and within 250 ms more by this
process's clock (which also counts the HTTP exchange and this process's scheduling on a
busy CI machine): hang guards that a one-second hang (the client's socket timeout)
breaks, while a busy machine does not. Afterwards the service must read the store again
on its own. How close answers come to the deadline is measured in ``bench/``, not
asserted here.
"""

from __future__ import annotations

import gc
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx
import pytest

from tests.conftest import FEATUREDEFS
from tests.redis_server import RedisServer
from tests.service_process import ServiceProcess
from tests.support import engine_for, replay_good_lines, wait_until
from windvane.inputs.deadline import DEFAULT_DEADLINE_MS

BOUND_MS = DEFAULT_DEADLINE_MS + 50
WALL_BOUND_MS = DEFAULT_DEADLINE_MS + 250
NOW = round(time.time())
REQUEST = {"user": "user-3", "app": "app-1", "ts": NOW, "campaigns": ["camp-0"]}
PATIENT = {**REQUEST, "deadline_ms": 3000}
STORED = ("session_depth", "imps_24h", "clicks_7d", "secs_since_imp", "app_win_rate", "app_ctr")
# Per-user state is never cached by the service, so only the store can supply it.
PER_USER = ("session_depth", "imps_24h", "clicks_7d", "secs_since_imp")
# Modelled on OpenRTB 2.5 section 6.2.3 (Example 3, Mobile), trimmed to the fields read:
# two imps of different sizes for one user (device.ifa) in one app.
BID_REQUEST = {
    "id": "hung-store-1",
    "imp": [
        {"id": "1", "banner": {"w": 728, "h": 90}},
        {"id": "2", "banner": {"w": 320, "h": 50}},
    ],
    "app": {"bundle": "app-1"},
    "device": {"ifa": "user-3", "os": "iOS", "w": 1536, "h": 2048, "pxratio": 2},
}


@pytest.fixture
def server(tmp_path: Path) -> Iterator[RedisServer]:
    """A loaded redis-server of this test's own, which it may freeze, kill and restart.

    Append-only with fsync on every write, so a restart after SIGKILL has the same state.
    """
    server = RedisServer(appendonly=True).start()
    try:
        engine = engine_for(FEATUREDEFS, server.url)
        replay_good_lines(engine, tmp_path)
        engine.close()
        yield server
    finally:
        server.cleanup()


@pytest.fixture
def quiet_collector() -> Iterator[None]:
    """No cycle collection in this process while lookups are timed.

    A full pass over the session's objects takes tens of milliseconds here and would
    count against the wall-clock bound as if the service had been slow.
    """
    gc.collect()
    gc.disable()
    try:
        yield
    finally:
        gc.enable()


def service(server: RedisServer) -> ServiceProcess:
    """The service with its default deadline, which is what the bound is about."""
    return ServiceProcess("--store", server.url, "--defs", str(FEATUREDEFS), "--read-only")


def in_time(client: httpx.Client, path: str, body: dict[str, Any]) -> dict[str, Any]:
    """The answer to one call, after checking that it came by the bound."""
    started = time.perf_counter()
    response = client.post(path, json=body)
    wall_ms = (time.perf_counter() - started) * 1000
    assert response.status_code == 200, response.text
    answer = response.json()
    assert answer["elapsed_ms"] <= BOUND_MS, answer
    assert wall_ms <= WALL_BOUND_MS, (wall_ms, answer)
    return answer


def recovers(client: httpx.Client, healthy: dict[str, Any]) -> None:
    """Lookups, each in time, until the stored features come back as they were."""
    answers: list[dict[str, Any]] = []

    def stored() -> bool:
        answers.append(in_time(client, "/v1/lookup", REQUEST))
        return answers[-1]["stored"] == "ok"

    assert wait_until(stored, timeout_s=10, step_s=0.02), answers[-3:]
    assert answers[-1]["features"] == healthy["features"]
    assert answers[-1]["campaigns"] == healthy["campaigns"]


@pytest.mark.usefixtures("quiet_collector")
def test_lookups_answer_in_time_while_the_store_is_frozen(server: RedisServer) -> None:
    with service(server) as svc, httpx.Client(base_url=svc.url, timeout=10) as client:
        healthy = client.post("/v1/lookup", json=PATIENT).json()
        assert healthy["stored"] == "ok"
        assert all(healthy["features"][name] is not None for name in STORED)

        received = server.connections_received()
        with server.frozen():
            for _ in range(50):
                answer = in_time(client, "/v1/lookup", REQUEST)
                assert answer["stored"] == "missing"
                assert all(answer["features"][name] is None for name in PER_USER)
                # Request-time features do not need the store.
                assert answer["features"]["local_hour"] == healthy["features"]["local_hour"]

        assert wait_until(lambda: client.get("/v1/health").status_code == 200, timeout_s=10)
        recovers(client, healthy)
        # Reconnecting happens in the background, a few connections at a time: the frozen
        # server was not handed a new connection by every lookup that gave up on it.
        assert server.connections_received() - received <= 10


@pytest.mark.usefixtures("quiet_collector")
def test_lookups_answer_in_time_while_the_store_is_down_and_restarts(
    server: RedisServer,
) -> None:
    with service(server) as svc, httpx.Client(base_url=svc.url, timeout=10) as client:
        healthy = client.post("/v1/lookup", json=PATIENT).json()
        assert healthy["stored"] == "ok"

        server.kill()
        for _ in range(30):
            assert in_time(client, "/v1/lookup", REQUEST)["stored"] == "missing"
        server.start()  # the same port and append-only file
        recovers(client, healthy)
        for _ in range(30):
            in_time(client, "/v1/lookup", REQUEST)


def shared_stored(imp: dict[str, Any]) -> dict[str, Any]:
    return {name: imp["features"][name] for name in STORED} | {"campaigns": imp["campaigns"]}


@pytest.mark.usefixtures("quiet_collector")
def test_the_imps_of_a_bid_request_share_one_stored_state(server: RedisServer) -> None:
    path = "/v1/lookup/openrtb?campaigns=camp-0,camp-1"
    with service(server) as svc, httpx.Client(base_url=svc.url, timeout=10) as client:
        patient = client.post(path, json=BID_REQUEST, headers={"X-Deadline-Ms": "3000"})
        first, second = patient.json()["imps"]
        assert (first["stored"], second["stored"]) == ("ok", "ok")
        assert shared_stored(first) == shared_stored(second)
        assert first["features"]["imps_24h"] is not None
        # The slot is the imp's own: a request-time feature, different per imp.
        assert first["features"]["screen_fraction"] != second["features"]["screen_fraction"]

        # Under the default deadline an imp may lose the store, but never alone.
        for _ in range(30):
            response = client.post(path, json=BID_REQUEST)
            assert response.status_code == 200, response.text
            first, second = response.json()["imps"]
            assert first["stored"] == second["stored"]
            assert shared_stored(first) == shared_stored(second)

        with server.frozen():
            for _ in range(10):
                answer = in_time(client, path, BID_REQUEST)
                states = [imp["stored"] for imp in answer["imps"]]
                assert states == ["missing", "missing"]
