"""A ``windvane ingest`` worker process that a test starts, kills and restarts."""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
import uuid
from pathlib import Path

from tests.child_process import stop_child

ROOT = Path(__file__).resolve().parent.parent


class IngestProcess:
    def __init__(self, stream: str, store: str, *args: str) -> None:
        self.stream = stream
        self.store = store
        self.args = args
        self.env = {**os.environ, "PYTHONPATH": str(ROOT / "service")}
        self.process: subprocess.Popen[bytes] | None = None
        self.started_s = 0.0
        self.log = ROOT / ".pytest_cache" / f"ingest-{uuid.uuid4().hex[:8]}.log"

    def start(self) -> IngestProcess:
        self.log.parent.mkdir(exist_ok=True)
        name = f"worker-{uuid.uuid4().hex[:8]}"
        self.started_s = time.monotonic()
        with self.log.open("ab") as out:
            self.process = subprocess.Popen(
                [sys.executable, "-m", "windvane", "ingest", "--stream", self.stream,
                 "--store", self.store, "--name", name, *self.args],
                cwd=ROOT, env=self.env, stdout=out, stderr=subprocess.STDOUT,
            )  # fmt: skip
        return self

    def kill(self) -> None:
        """SIGKILL: no cleanup, leases and pending entries left behind."""
        if self.process is not None and self.process.poll() is None:
            self.process.send_signal(signal.SIGKILL)
            self.process.wait()

    def stop(self) -> None:
        stop_child(self.process, signal.SIGTERM, timeout_s=15)

    def output(self) -> str:
        return self.log.read_text(errors="replace") if self.log.exists() else ""
