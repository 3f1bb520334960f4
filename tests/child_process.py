"""Stopping a child process the way its tests and benchmarks need: ask, wait, then kill."""

from __future__ import annotations

import signal
import subprocess


def stop_child(
    process: subprocess.Popen[bytes] | None,
    signum: int = signal.SIGTERM,
    timeout_s: float = 10,
) -> None:
    """Send ``signum`` and wait up to ``timeout_s`` for a clean exit, then SIGKILL.

    A child that ignores its stop signal must not hang a test run or leave a port taken.
    """
    if process is None or process.poll() is not None:
        return
    process.send_signal(signum)
    try:
        process.wait(timeout=timeout_s)
    except subprocess.TimeoutExpired:
        process.kill()
        process.wait()
