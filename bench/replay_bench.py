"""Replay throughput against its floor: reading and JSON-parsing the same log with no state work.

The floor is what any replay must do at the least (read the lines, decode the JSON);
windvane adds validation, routing, the update script and the store round trips. Replay
into a real redis-server has a target; replay into the embedded ``memory://`` store is
reported for newcomers' expectations (fakeredis executes every command in Python).
"""

from __future__ import annotations

import time
import uuid

import orjson

from bench.common import Context, Measure, Result, Stopwatch, redis_cpu_s
from tests.redis_server import RedisServer
from windvane.definitions.plan import load_plan
from windvane.engine import Engine
from windvane.ingest.logfile import read_lines
from windvane.ingest.rejects import RejectsFile
from windvane.ingest.replay import replay
from windvane.store import open_store
from windvane_demo.generate import build_log, write_lines

FEATUREDEFS = "featuredefs"


def make_log(ctx: Context, events: int, name: str) -> tuple[str, int]:
    ctx.work.mkdir(parents=True, exist_ok=True)
    path = ctx.work / name
    demo = build_log(seed=41, events=events, end_ts=time.time() // 60 * 60, hours=24)
    write_lines(demo.lines, str(path))
    return str(path), len(demo.lines)


def floor_rate(path: str) -> float:
    """Lines per second for reading and decoding the log, nothing else."""
    count = 0
    with Stopwatch() as watch:
        for _, line in read_lines(path):
            try:  # noqa: SIM105 - a plain try costs the floor less than contextlib.suppress
                orjson.loads(line)
            except orjson.JSONDecodeError:
                pass
            count += 1
    return count / watch.elapsed_s


def replay_rate(
    url: str, path: str, ctx: Context, store_cpu_us: list[float] | None = None
) -> float:
    """Events/s; with ``store_cpu_us``, the server's CPU per event is appended to it."""
    store = open_store(url)
    store.flush()
    engine = Engine(load_plan(FEATUREDEFS), store, "bench")
    before = redis_cpu_s(url) if store_cpu_us is not None else 0.0
    with RejectsFile(ctx.work / "replay-rejects.jsonl") as rejects:
        stats = replay(engine, [path], rejects)
    if store_cpu_us is not None:
        store_cpu_us.append((redis_cpu_s(url) - before) / stats.lines * 1e6)
    engine.close()
    return stats.lines / stats.elapsed_s


def run(ctx: Context) -> list[Result]:
    path, lines = make_log(ctx, ctx.size(600_000, 5_000), "replay.jsonl")
    memory_path, memory_lines = make_log(ctx, ctx.size(60_000, 2_000), "replay-memory.jsonl")
    runs = 1 if ctx.smoke else ctx.runs
    server = RedisServer().start()
    try:
        floors, into_redis, store_cpu_us = [], [], []
        for _ in range(runs):
            floors.append(floor_rate(path))
            into_redis.append(replay_rate(server.url, path, ctx, store_cpu_us))
        memory_floors, into_memory = [], []
        for _ in range(runs):
            memory_floors.append(floor_rate(memory_path))
            into_memory.append(replay_rate(f"memory://bench-{uuid.uuid4().hex}", memory_path, ctx))
    finally:
        server.cleanup()
    return [
        Result(
            "replay into redis-server",
            "events/s",
            Measure.of(into_redis),
            Measure.of(floors),
            ("min", 100_000),
            {
                "lines": lines,
                "floor": "read + orjson.loads, no state",
                "store_cpu_us_per_event": store_cpu_us,
            },
        ),
        Result(
            "replay into memory://",
            "events/s",
            Measure.of(into_memory),
            Measure.of(memory_floors),
            None,
            {"lines": memory_lines},
        ),
    ]
