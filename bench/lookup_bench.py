"""Lookup throughput and latency of ``windvane serve`` against the floor app, same load, same run.

Both servers read the same Redis, loaded from one demo log, and receive the same
request bodies (the demo's lookups, three candidate campaigns each, asked about now)
from 8 keep-alive connections. The floor (``bench.floor_app``) sends windvane's exact
commands for each body in one round trip and does nothing else, so the ratios say
what windvane's parsing, features, scoring and framework cost on top of HTTP and Redis.
Runs alternate between the two servers so that drift on a shared machine hits both.
"""

from __future__ import annotations

import contextlib
import http.client
import importlib.metadata
import os
import platform
import signal
import subprocess
import sys
import time
from collections.abc import Callable, Sequence
from pathlib import Path
from typing import Any
from urllib.parse import urlsplit

import orjson

from bench.common import ROOT, Context, Measure, Result, redis_cpu_s, redis_server_version
from bench.load import CONNECTIONS, PERCENTILES, LoadResult, drive, generator_name
from tests.child_process import stop_child
from tests.redis_server import RedisServer, free_port
from windvane.engine import Engine
from windvane.ingest.rejects import RejectsFile
from windvane.ingest.replay import replay
from windvane.inputs.lookup_request import parse_lookup_request
from windvane.models.registry import ModelRegistry
from windvane.serving.state import feature_shapes
from windvane_demo.generate import build_log, write_lines

MODEL = "demo-ctr"
SNAPSHOT = ROOT / "demo" / "snapshot.json"
DEFS = ROOT / "featuredefs"
SEED = 7
DEADLINE_MS = 50
SERVERS = ("windvane", "floor")


def run(ctx: Context) -> list[Result]:
    work = ctx.work / "lookup"
    work.mkdir(parents=True, exist_ok=True)
    events = ctx.size(200_000, 5_000)
    duration_s = 2.0 if ctx.smoke else 15.0
    warmup_s = 1.0 if ctx.smoke else 3.0
    runs = 1 if ctx.smoke else ctx.runs
    with contextlib.ExitStack() as stack:
        redis_server = RedisServer()
        stack.callback(redis_server.cleanup)
        redis_server.start()
        bodies = load_demo(redis_server.url, events, work)
        commands_file = work / "commands.json"
        commands_file.write_bytes(orjson.dumps(commands_for(redis_server.url, bodies)))
        windvane = stack.enter_context(
            ServerProcess("windvane", windvane_args(redis_server.url), work, "/v1/health")
        )
        floor = stack.enter_context(
            ServerProcess("floor", floor_args(redis_server.url, commands_file), work, bodies[0])
        )
        windvane.start()
        floor.start()
        check_windvane_answers(windvane.url, bodies)
        check_floor_answers(floor.url, bodies)
        servers = {"windvane": windvane, "floor": floor}
        for server in servers.values():
            drive(server.url, bodies, warmup_s, work)
        measured: dict[str, list[LoadResult]] = {name: [] for name in SERVERS}
        store_cpu_us: dict[str, list[float]] = {name: [] for name in SERVERS}
        for index in range(runs):
            for name in SERVERS if index % 2 == 0 else SERVERS[::-1]:
                before = redis_cpu_s(redis_server.url)
                measured[name].append(drive(servers[name].url, bodies, duration_s, work))
                spent = redis_cpu_s(redis_server.url) - before
                store_cpu_us[name].append(spent / max(measured[name][-1].requests, 1) * 1e6)
        misses = store_misses(windvane.url)
    detail = {
        "generator": measured["windvane"][0].generator,
        "connections": CONNECTIONS,
        "duration_s": duration_s,
        "runs": runs,
        "events": events,
        "bodies": len(bodies),
        "deadline_ms": DEADLINE_MS,
        "lookups_without_store": misses,
        "errors": {name: [r.errors for r in measured[name]] for name in SERVERS},
        "requests": {name: [r.requests for r in measured[name]] for name in SERVERS},
        "versions": versions(),
        # Redis CPU (user + system) per answered request, for the capacity note.
        "store_cpu_us_per_request": store_cpu_us,
    }
    for name in SERVERS:
        bad = sum(r.errors for r in measured[name])
        if bad:
            ctx.notes.append(f"lookup: {name} answered {bad} requests with errors or non-2xx")
    if misses:
        ctx.notes.append(f"lookup: {misses} windvane lookups went without the store (deadline)")
    return results(measured, detail)


def results(measured: dict[str, list[LoadResult]], detail: dict[str, Any]) -> list[Result]:
    def measure(name: str, figure: Callable[[LoadResult], float]) -> Measure:
        return Measure.of([figure(r) for r in measured[name]])

    def pair(figure: Callable[[LoadResult], float]) -> tuple[Measure, Measure]:
        return measure("windvane", figure), measure("floor", figure)

    latency = {
        name: {label: [r.latency_ms[label] for r in measured[name]] for label in PERCENTILES}
        for name in SERVERS
    }
    rps, rps_floor = pair(lambda r: r.requests_per_s)
    p50, p50_floor = pair(lambda r: r.p50_ms)
    p99, p99_floor = pair(lambda r: r.p99_ms)
    p999, p999_floor = pair(lambda r: r.p999_ms)
    return [
        Result(
            "lookup requests/s",
            "req/s",
            rps,
            rps_floor,
            ("min_ratio", 0.7),
            {**detail, "latency_percentiles_ms": latency},
        ),
        Result("lookup p50", "ms", p50, p50_floor, None, detail),
        Result("lookup p99", "ms", p99, p99_floor, ("max_ratio", 1.5), detail),
        Result("lookup p99.9", "ms", p999, p999_floor, None, detail),
    ]


# -- the data -----------------------------------------------------------------------


def load_demo(redis_url: str, events: int, work: Path) -> list[bytes]:
    """Fill Redis from a fresh demo log ending now; return the lookup bodies to send."""
    now = time.time()
    demo = build_log(SEED, events, now)
    log = work / "demo.jsonl"
    write_lines(demo.lines, str(log))
    engine = Engine.open(DEFS, redis_url)
    try:
        with RejectsFile(work / "rejects.jsonl") as rejects:
            replay(engine, [str(log)], rejects)
        registry = ModelRegistry(engine.store, feature_shapes(engine.plan))
        registry.publish(MODEL, SNAPSHOT.read_bytes(), "bench", activate=True)
    finally:
        engine.close()
        log.unlink(missing_ok=True)
    if not demo.lookups:
        raise RuntimeError("the demo log produced no lookups")
    return [orjson.dumps({**lookup, "ts": now, "model": MODEL}) for lookup in demo.lookups]


def commands_for(redis_url: str, bodies: Sequence[bytes]) -> dict[str, list[list[str]]]:
    """For each body, the commands windvane's lookup sends for it (the floor sends the same)."""
    engine = Engine.open(DEFS, redis_url)
    try:
        prepared = {b: engine.reader.prepare(parse_lookup_request(orjson.loads(b))) for b in bodies}
    finally:
        engine.close()
    return {body.decode(): [list(c) for c in p.commands] for body, p in prepared.items()}


# -- the servers --------------------------------------------------------------------


def windvane_args(redis_url: str) -> list[str]:
    return [
        sys.executable, "-m", "windvane", "serve", "--store", redis_url, "--defs", str(DEFS),
        "--read-only", "--deadline-ms", str(DEADLINE_MS), "--default-model", MODEL,
    ]  # fmt: skip


def floor_args(redis_url: str, commands_file: Path) -> list[str]:
    return [
        sys.executable, "-m", "bench.floor_app", "--redis", redis_url,
        "--commands", str(commands_file),
    ]  # fmt: skip


class ServerProcess:
    """An HTTP server this benchmark starts on a free port, waits for, and always stops.

    ``ready`` is a path to GET, or a body to POST, that answers 200 once it serves.
    """

    def __init__(self, name: str, args: list[str], work: Path, ready: str | bytes) -> None:
        self.name = name
        self.port = free_port()
        self.args = [*args, "--port", str(self.port)]
        self.log = work / f"{name}.log"
        self.ready = ready
        self.process: subprocess.Popen[bytes] | None = None

    @property
    def url(self) -> str:
        return f"http://127.0.0.1:{self.port}/v1/lookup"

    def start(self, timeout_s: float = 60) -> ServerProcess:
        env = {**os.environ, "PYTHONPATH": os.pathsep.join([str(ROOT), str(ROOT / "service")])}
        with self.log.open("wb") as out:
            self.process = subprocess.Popen(
                self.args, cwd=ROOT, env=env, stdout=out, stderr=subprocess.STDOUT
            )
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            if self.process.poll() is not None:
                raise RuntimeError(f"{self.name} exited:\n{self.log.read_text(errors='replace')}")
            with contextlib.suppress(OSError):
                if isinstance(self.ready, bytes):
                    status, _ = post(self.url, self.ready)
                else:
                    status, _ = get(f"http://127.0.0.1:{self.port}{self.ready}")
                if status == 200:
                    return self
            time.sleep(0.05)
        self.stop()
        raise RuntimeError(f"{self.name} did not start:\n{self.log.read_text(errors='replace')}")

    def stop(self) -> None:
        stop_child(self.process, signal.SIGINT)
        self.process = None

    def __enter__(self) -> ServerProcess:
        return self

    def __exit__(self, *exc: object) -> None:
        self.stop()


def request(method: str, url: str, body: bytes | None = None) -> tuple[int, bytes]:
    parts = urlsplit(url)
    connection = http.client.HTTPConnection(parts.hostname or "127.0.0.1", parts.port, timeout=5)
    try:
        headers = {"content-type": "application/json"} if body is not None else {}
        connection.request(method, parts.path, body=body, headers=headers)
        response = connection.getresponse()
        return response.status, response.read()
    finally:
        connection.close()


def post(url: str, body: bytes) -> tuple[int, bytes]:
    return request("POST", url, body)


def get(url: str) -> tuple[int, bytes]:
    return request("GET", url)


# -- checks -------------------------------------------------------------------------


def check_windvane_answers(url: str, bodies: Sequence[bytes]) -> None:
    """Refuse to time answers that are not real: each must be 200, stored "ok", scored."""
    for body in bodies:
        status, raw = post(url, body)
        answer = orjson.loads(raw) if status == 200 else {}
        campaigns = orjson.loads(body)["campaigns"]
        scores = answer.get("scores") or {}
        problems = [
            f"status {status}" if status != 200 else "",
            f"stored {answer.get('stored')!r}" if answer.get("stored") != "ok" else "",
            "scores missing" if sorted(scores) != sorted(campaigns) else "",
            "model missing" if (answer.get("model") or {}).get("name") != MODEL else "",
        ]
        if any(problems):
            reasons = ", ".join(p for p in problems if p)
            raise RuntimeError(f"windvane answered {reasons} for {body!r}: {raw[:500]!r}")


def check_floor_answers(url: str, bodies: Sequence[bytes]) -> None:
    for body in bodies:
        status, raw = post(url, body)
        if status != 200:
            raise RuntimeError(f"the floor answered {status} for {body!r}: {raw[:200]!r}")


def store_misses(url: str) -> int:
    """How many of windvane's lookups ran out of time before Redis answered (0 is expected)."""
    status, raw = get(url.replace("/v1/lookup", "/v1/health"))
    return int(orjson.loads(raw).get("lookups_without_store", -1)) if status == 200 else -1


def versions() -> dict[str, str]:
    def version(package: str) -> str:
        try:
            return importlib.metadata.version(package)
        except importlib.metadata.PackageNotFoundError:
            return "not installed"

    packages = ("windvane", "uvicorn", "uvloop", "httptools", "fastapi", "redis", "hiredis")
    return {
        "python": platform.python_version(),
        "redis-server": redis_server_version(),
        "load generator": generator_name(),
        **{package: version(package) for package in packages},
    }
