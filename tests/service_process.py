"""A ``windvane serve`` process that a test starts on a free port and stops."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
from pathlib import Path

import httpx

from tests.child_process import stop_child
from tests.redis_server import free_port
from tests.support import wait_until

ROOT = Path(__file__).resolve().parent.parent


class ServiceProcess:
    def __init__(self, *args: str, token: str | None = None) -> None:
        self.port = free_port()
        self.args = [sys.executable, "-m", "windvane", "serve", "--port", str(self.port), *args]
        self.env = {**os.environ, "PYTHONPATH": str(ROOT / "service")}
        self.env.pop("WINDVANE_TOKEN", None)
        if token is not None:
            self.env["WINDVANE_TOKEN"] = token
        self.process: subprocess.Popen[bytes] | None = None
        self.log = ROOT / ".pytest_cache" / f"service-{self.port}.log"

    @property
    def url(self) -> str:
        return f"http://127.0.0.1:{self.port}"

    def start(self, timeout_s: float = 30) -> ServiceProcess:
        self.log.parent.mkdir(exist_ok=True)
        with self.log.open("wb") as out:
            self.process = subprocess.Popen(
                self.args, cwd=ROOT, env=self.env, stdout=out, stderr=subprocess.STDOUT
            )
        if wait_until(self._answers, timeout_s, step_s=0.05):
            return self
        self.stop()
        raise RuntimeError(f"windvane serve did not start:\n{self.log.read_text()}")

    def _answers(self) -> bool:
        """True once the service answers HTTP; a process that has exited will never answer."""
        if self.process is None or self.process.poll() is not None:
            raise RuntimeError(f"windvane serve exited:\n{self.log.read_text()}")
        try:
            httpx.get(f"{self.url}/openapi.json", timeout=0.5)
        except httpx.TransportError:
            return False
        return True

    def stop(self) -> None:
        stop_child(self.process, signal.SIGINT)
        self.process = None

    def __enter__(self) -> ServiceProcess:
        return self.start()

    def __exit__(self, *exc: object) -> None:
        self.stop()
