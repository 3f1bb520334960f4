"""A redis-server that a test starts, owns and stops: never one it did not start.

It listens on a free loopback port with its own data directory, so tests neither
touch nor depend on any other Redis on the machine.
"""

from __future__ import annotations

import contextlib
import os
import shutil
import signal
import socket
import subprocess
import tempfile
from collections.abc import Iterator
from pathlib import Path

import redis

from tests.child_process import stop_child
from tests.support import wait_until


def free_port() -> int:
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        return sock.getsockname()[1]


class RedisServer:
    def __init__(self, *, appendonly: bool = False, port: int | None = None) -> None:
        binary = shutil.which("redis-server")
        if binary is None:
            raise RuntimeError("redis-server is not on PATH; install Redis to run the tests")
        self.binary = binary
        self.port = port or free_port()
        self.directory = Path(tempfile.mkdtemp(prefix="windvane-redis-"))
        self.appendonly = appendonly
        self.process: subprocess.Popen[bytes] | None = None

    @property
    def url(self) -> str:
        return f"redis://127.0.0.1:{self.port}/0"

    def start(self) -> RedisServer:
        args = [
            self.binary,
            "--port",
            str(self.port),
            "--bind",
            "127.0.0.1",
            "--dir",
            str(self.directory),
            "--save",
            "",
            "--daemonize",
            "no",
            "--logfile",
            str(self.directory / "redis.log"),
        ]
        if self.appendonly:
            args += ["--appendonly", "yes", "--appendfsync", "always"]
        else:
            args += ["--appendonly", "no"]
        self.process = subprocess.Popen(args, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
        client = redis.Redis(port=self.port, socket_connect_timeout=0.2)
        if not wait_until(lambda: self._answers(client), timeout_s=10):
            raise self._did_not_start()
        return self

    def _answers(self, client: redis.Redis) -> bool:
        """True once the server answers PING; a server that has exited never will."""
        try:
            client.ping()
        except redis.exceptions.ConnectionError:
            if self.process is None or self.process.poll() is not None:
                raise self._did_not_start() from None
            return False
        finally:
            client.close()
        return True

    def _did_not_start(self) -> RuntimeError:
        """The error to raise, carrying the server's log, which says why it did not start."""
        log = (self.directory / "redis.log").read_text(errors="replace")
        return RuntimeError(f"redis-server did not start:\n{log}")

    def stop(self) -> None:
        stop_child(self.process)
        self.process = None

    @contextlib.contextmanager
    def frozen(self) -> Iterator[None]:
        """SIGSTOP for the block: connections stay open and nothing answers, as on a hung host.

        SIGCONT follows even when the block fails, so the server can still be stopped.
        """
        assert self.process is not None
        os.kill(self.process.pid, signal.SIGSTOP)
        try:
            yield
        finally:
            os.kill(self.process.pid, signal.SIGCONT)

    def connections_received(self) -> int:
        """Connections the server has accepted since it started, not counting this call's."""
        client = redis.Redis(host="127.0.0.1", port=self.port)
        try:
            return int(client.info("stats")["total_connections_received"]) - 1
        finally:
            client.close()

    def kill(self) -> None:
        """SIGKILL, like a crash: what append-only persistence has not synced is lost."""
        if self.process is not None and self.process.poll() is None:
            self.process.kill()
            self.process.wait()
        self.process = None

    def cleanup(self) -> None:
        self.stop()
        shutil.rmtree(self.directory, ignore_errors=True)
