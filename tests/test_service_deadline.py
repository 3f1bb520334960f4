"""A store outage never hangs the bidder: lookups answer before their deadline with what they have.

The store is frozen (SIGSTOP: connections stay open but nothing answers, like a
blackholed port) and then stopped (connections refused). Every lookup must still be a
200 with the request-time features, null stored features, ``"stored": "missing"`` and
scores from the snapshot's defaults. The client's own timeout (3 s, against a 30 ms
deadline) is the hang guard; how close answers come to the deadline is measured by the
benchmark, not asserted here.
"""

from __future__ import annotations

import os
import signal
import time
from pathlib import Path

import httpx

from tests.conftest import FEATUREDEFS
from tests.redis_server import RedisServer
from tests.service_process import ServiceProcess
from tests.support import engine_for
from tests.test_replay import good_lines
from tests.test_snapshots import GOOD
from windvane.ingest.rejects import RejectsFile
from windvane.ingest.replay import replay
from windvane.models.registry import ModelRegistry
from windvane.models.scoring import Scorer
from windvane.models.snapshot import parse_snapshot
from windvane.serving.state import feature_shapes

STORED = ("session_depth", "imps_24h", "clicks_7d", "secs_since_imp", "app_win_rate", "app_ctr")
NOW = round(time.time())


def test_lookups_answer_in_time_when_the_store_freezes_or_stops(tmp_path: Path) -> None:
    server = RedisServer().start()
    frozen = False
    try:
        engine = engine_for(FEATUREDEFS, server.url)
        log = tmp_path / "log.jsonl"
        log.write_bytes(b"\n".join(good_lines(600)) + b"\n")
        with RejectsFile(tmp_path / "rejects.jsonl") as rejects:
            replay(engine, [str(log)], rejects)
        registry = ModelRegistry(engine.store.client, feature_shapes(engine.plan))  # type: ignore[attr-defined]
        registry.publish("ctr", GOOD, "test", activate=True)
        scorer = Scorer(parse_snapshot(GOOD), frozenset({"imps_1h"}))
        request = {
            "user": "user-3",
            "app": "app-1",
            "ts": NOW,
            "campaigns": ["camp-0"],
            "slot": {"w": 320, "h": 50},
            "device": {"w": 1080, "h": 1920, "pxratio": 3},
        }
        with (
            ServiceProcess(
                "--store",
                server.url,
                "--defs",
                str(FEATUREDEFS),
                "--read-only",
                "--default-model",
                "ctr",
                "--deadline-ms",
                "30",
            ) as svc,
            httpx.Client(base_url=svc.url, timeout=3) as client,
        ):
            healthy = client.post("/v1/lookup", json={**request, "deadline_ms": 3000}).json()
            assert healthy["stored"] == "ok"
            assert healthy["features"]["imps_24h"] is not None

            os.kill(server.process.pid, signal.SIGSTOP)  # type: ignore[union-attr]
            frozen = True
            time.sleep(1.1)  # cached app state is at most 1 s old, so it has aged out
            for _ in range(10):
                check_missing(client.post("/v1/lookup", json=request), healthy, scorer)
            os.kill(server.process.pid, signal.SIGCONT)  # type: ignore[union-attr]
            frozen = False

            recovered = wait_for(
                lambda: client.post("/v1/lookup", json={**request, "deadline_ms": 3000})
            )
            assert recovered.json()["features"] == healthy["features"]

            server.stop()
            time.sleep(1.1)
            for _ in range(10):
                check_missing(client.post("/v1/lookup", json=request), healthy, scorer)
            health = client.get("/v1/health")
            assert (health.status_code, health.json()["store"]) == (503, "unreachable")
    finally:
        if frozen and server.process is not None:
            os.kill(server.process.pid, signal.SIGCONT)
        server.cleanup()


def check_missing(response: httpx.Response, healthy: dict, scorer: Scorer) -> None:
    assert response.status_code == 200, response.text
    body = response.json()
    assert body["stored"] == "missing"
    assert all(body["features"][name] is None for name in STORED)
    assert body["campaigns"]["camp-0"]["imps_1h"] is None
    for name in ("local_hour", "local_dow", "screen_fraction"):
        assert body["features"][name] == healthy["features"][name]
    # Scores fall back to each term's default for a missing feature.
    assert body["scores"]["camp-0"] == scorer.score(body["features"], body["campaigns"]["camp-0"])
    assert body["scores"]["camp-0"] != healthy["scores"]["camp-0"]


def wait_for(call, attempts: int = 60) -> httpx.Response:  # type: ignore[no-untyped-def]
    for _ in range(attempts):
        response = call()
        if response.json()["stored"] == "ok":
            return response
        time.sleep(0.05)
    raise AssertionError("the service did not recover after the store came back")
