"""Write protection: every write without the right bearer token is a 401 and changes nothing."""

from __future__ import annotations

import os
import subprocess
import sys

import httpx

from tests.conftest import FEATUREDEFS, ROOT
from tests.service_process import ServiceProcess
from tests.support import GOOD_SNAPSHOT
from windvane.models.registry import ModelRegistry
from windvane.store import open_store

TOKEN = "s3cret-token"


def registry_state(url: str) -> tuple:
    store = open_store(url)
    models = ModelRegistry(store, {})
    return tuple((m, models.history(m), models.active(m), models.audit(m)) for m in models.models())


WRITES = [
    ("post", "/v1/models/ctr/snapshots", {**GOOD_SNAPSHOT, "version": "v9"}),
    ("post", "/v1/models/ctr/snapshots?activate=true", {**GOOD_SNAPSHOT, "version": "v9"}),
    ("post", "/v1/models/ctr/activate", {"arms": [{"version": "v1", "weight": 1}]}),
    ("post", "/v1/models/ctr/rollback", None),
]


BAD_HEADERS = [
    {},
    {"Authorization": "Bearer wrong"},
    {"Authorization": f"Basic {TOKEN}"},
    {"Authorization": f"Bearer {TOKEN}x"},
    {"Authorization": "Bearer"},
    {"Authorization": TOKEN},
]


def test_writes_without_the_token_are_refused(redis_server) -> None:
    open_store(redis_server.url).flush()
    with ServiceProcess(
        "--store", redis_server.url, "--defs", str(FEATUREDEFS), token=TOKEN
    ) as svc:
        good = {"Authorization": f"Bearer {TOKEN}"}
        created = httpx.post(
            f"{svc.url}/v1/models/ctr/snapshots", json=GOOD_SNAPSHOT, headers=good, timeout=5
        )
        assert created.status_code == 201
        before = registry_state(redis_server.url)
        for headers in BAD_HEADERS:
            for method, path, body in WRITES:
                answer = httpx.request(
                    method, f"{svc.url}{path}", json=body, headers=headers, timeout=5
                )
                assert answer.status_code == 401, (path, headers, answer.text)
                assert answer.headers["www-authenticate"] == "Bearer"
                assert answer.json()["error"]["field"] == "authorization"
        assert registry_state(redis_server.url) == before
        # Lookups and reads stay open.
        assert httpx.get(f"{svc.url}/v1/models", timeout=5).status_code == 200


def test_read_only_service_refuses_every_write(redis_server) -> None:
    open_store(redis_server.url).flush()
    with ServiceProcess(
        "--store", redis_server.url, "--defs", str(FEATUREDEFS), "--read-only"
    ) as svc:
        for method, path, body in WRITES:
            answer = httpx.request(
                method,
                f"{svc.url}{path}",
                json=body,
                timeout=5,
                headers={"Authorization": f"Bearer {TOKEN}"},
            )
            assert answer.status_code == 401
        assert registry_state(redis_server.url) == ()


def test_refuses_to_start_with_writes_and_no_token() -> None:
    env = {k: v for k, v in os.environ.items() if k != "WINDVANE_TOKEN"}
    env["PYTHONPATH"] = str(ROOT / "service")
    done = subprocess.run(
        [sys.executable, "-m", "windvane", "serve", "--defs", str(FEATUREDEFS)],
        env=env,
        capture_output=True,
        timeout=60,
    )
    assert done.returncode == 2
    assert done.stderr.decode().startswith(
        "windvane: refusing to start: write endpoints are enabled"
    )
    assert b"Traceback" not in done.stderr
