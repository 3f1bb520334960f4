"""The newcomer's path: windvane demo's curl commands work, then a 90/10 split and a rollback."""

from __future__ import annotations

import os
import re
import shutil
import signal
import subprocess
import sys
from pathlib import Path

import httpx
import orjson

from tests.conftest import ROOT
from tests.redis_server import free_port
from tests.support import wait_until


def test_demo_curl_commands_split_and_rollback(tmp_path: Path) -> None:
    port = free_port()
    log = tmp_path / "demo.log"
    env = {**os.environ, "PYTHONPATH": str(ROOT / "service")}
    with log.open("wb") as out:
        process = subprocess.Popen(
            [
                sys.executable,
                "-m",
                "windvane",
                "demo",
                "--port",
                str(port),
                "--events",
                "8000",
                "--out",
                str(tmp_path / "out"),
            ],
            cwd=ROOT,
            env=env,
            stdout=out,
            stderr=subprocess.STDOUT,
        )
    try:
        base = f"http://127.0.0.1:{port}"
        wait_until_up(base, process, log)
        text = log.read_text()
        commands = re.findall(r"^  (curl -s .*)$", text, flags=re.MULTILINE)
        assert len(commands) == 3
        assert f"OpenAPI: {base}/docs" in text
        assert "Insecure dev mode" in text
        assert shutil.which("curl"), "the README's demo uses curl"
        answers = [orjson.loads(run(command)) for command in commands]
        lookup, openrtb, model = answers
        assert lookup["model"]["name"] == "demo-ctr"
        assert set(lookup["scores"]) == set(lookup["campaigns"])
        assert lookup["scores"]
        assert openrtb["imps"][0]["scores"]
        assert model["arms"][0]["snapshot"]["version"] == "2026-12-01.1"

        with httpx.Client(base_url=base, timeout=5) as client:
            second = (ROOT / "demo" / "snapshot-v2.json").read_bytes()
            published = client.post(
                "/v1/models/demo-ctr/snapshots",
                content=second,
                headers={"content-type": "application/json"},
            )
            assert published.status_code == 201, published.text
            split = {
                "arms": [
                    {"version": "2026-12-01.1", "weight": 90},
                    {"version": "2026-12-01.2", "weight": 10},
                ]
            }
            assert client.post("/v1/models/demo-ctr/activate", json=split).status_code == 200
            versions = [
                client.post("/v1/lookup", json={"user": f"demo-user-{n}"}).json()["model"][
                    "version"
                ]
                for n in range(300)
            ]
            assert set(versions) == {"2026-12-01.1", "2026-12-01.2"}
            assert client.post("/v1/models/demo-ctr/rollback").status_code == 200
            after = {
                client.post("/v1/lookup", json={"user": f"demo-user-{n}"}).json()["model"][
                    "version"
                ]
                for n in range(50)
            }
            assert after == {"2026-12-01.1"}
    finally:
        process.send_signal(signal.SIGINT)
        try:
            process.wait(timeout=10)
        except subprocess.TimeoutExpired:
            process.kill()


def run(command: str) -> bytes:
    done = subprocess.run(["bash", "-c", command], capture_output=True, timeout=30, check=True)
    return done.stdout


def wait_until_up(base: str, process: subprocess.Popen, log: Path) -> None:
    """Wait for the demo to answer; it generates and replays its log first, which takes a while."""

    def up() -> bool:
        if process.poll() is not None:
            raise AssertionError(f"windvane demo exited:\n{log.read_text()}")
        try:
            httpx.get(f"{base}/v1/health", timeout=0.5)
        except httpx.TransportError:
            return False
        return True

    if not wait_until(up, timeout_s=90, step_s=0.1):
        raise AssertionError(f"windvane demo did not start:\n{log.read_text()}")
