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
from tests.support import GOOD_SNAPSHOT, engine_for, good_lines, wait_until
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
        registry = ModelRegistry(engine.store, feature_shapes(engine.plan))
        registry.publish("ctr", GOOD_SNAPSHOT, "test", activate=True)
        scorer = Scorer(parse_snapshot(GOOD_SNAPSHOT), frozenset({"imps_1h"}))
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
            # A sleep, not a wait: cached app state is at most 1 s old, so after 1.1 s it has
            # aged out and every answer below must come from the frozen store.
            time.sleep(1.1)
            for _ in range(10):
                check_missing(client.post("/v1/lookup", json=request), healthy, scorer)
            os.kill(server.process.pid, signal.SIGCONT)  # type: ignore[union-attr]
            frozen = False

            answers: list[httpx.Response] = []

            def recovered() -> bool:
                answers.append(client.post("/v1/lookup", json={**request, "deadline_ms": 3000}))
                return answers[-1].json()["stored"] == "ok"

            assert wait_until(recovered, timeout_s=10, step_s=0.05), (
                "the service did not recover after the store came back"
            )
            assert answers[-1].json()["features"] == healthy["features"]

            server.stop()
            time.sleep(1.1)  # a sleep, not a wait: the cached app state ages out, as above
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
