"""Stream ingest: one worker's throughput against a stream floor, and freshness at a fixed rate.

The floor reads the same entries with the same consumer-group calls (XREADGROUP,
XACK) and decodes their JSON, without any state work: the least a worker must do.
Freshness is measured with events stamped at the moment they are appended, offered at
a steady 10,000 events/s, from the lag the worker itself reports (event time to state
write).
"""

from __future__ import annotations

import subprocess
import sys
import threading
import time
import uuid

import orjson
import redis

from bench.common import ROOT, Context, Measure, Result, redis_cpu_s
from tests.redis_server import RedisServer
from windvane.ingest.event_stream import append, shard_count, shard_of, shard_of_key
from windvane.inputs.events import parse_event_line
from windvane.keys import DEFAULT_GENERATION, consumer_group, ingest_status_key, stream_key
from windvane_demo.generate import build_log

SHARDS = 4


def entries(count: int) -> list[tuple[int, bytes]]:
    demo = build_log(seed=43, events=count, end_ts=time.time() // 60 * 60, hours=6)
    out = []
    for line in demo.lines:
        try:
            event = parse_event_line(line)
        except Exception:
            continue
        out.append((shard_of(event, SHARDS), line))
    return out


def fill(client: redis.Redis, batch: list[tuple[int, bytes]]) -> None:
    for start in range(0, len(batch), 5000):
        append(client, batch[start : start + 5000])


def unacknowledged(client: redis.Redis, group: str) -> int:
    total = 0
    for number in range(SHARDS):
        key = stream_key(number)
        length = client.xlen(key)
        for info in client.xinfo_groups(key):
            if info["name"].decode() == group:
                read = info.get("entries-read") or 0
                total += int(info["pending"]) + max(0, length - int(read))
    return total


def start_worker(url: str, name: str, *extra: str) -> subprocess.Popen[bytes]:
    return subprocess.Popen(
        [
            sys.executable,
            "-m",
            "windvane",
            "ingest",
            "--stream",
            url,
            "--store",
            url,
            "--name",
            name,
            "--status-every",
            "1",
            *extra,
        ],
        cwd=ROOT,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )


def worker_rate(
    url: str,
    count: int,
    store_cpu_us: list[float] | None = None,
    entry_bytes: list[float] | None = None,
) -> float:
    """Events/s of one worker draining a backlog, timed from its first read to the last ack.

    With ``store_cpu_us``, the server's CPU per event (state writes and the stream
    reads, acknowledgements and the polling of this benchmark) is appended to it; with
    ``entry_bytes``, the stream's memory per entry before the worker starts.
    """
    client = redis.Redis.from_url(url)
    client.flushall()
    shard_count(client, SHARDS)
    fill(client, entries(count))
    total = unacknowledged_total(client)
    if entry_bytes is not None:
        stream_bytes = sum(
            client.memory_usage(stream_key(n), samples=0) or 0 for n in range(SHARDS)
        )
        entry_bytes.append(stream_bytes / total)
    worker = start_worker(url, f"bench-{uuid.uuid4().hex[:6]}")
    try:
        group = consumer_group(DEFAULT_GENERATION)
        # Timed from the worker's first read (the group's entries-read moves off 0), so
        # the first step counts too and start-up does not.
        while _groups_missing(client, group) or _entries_read(client, group) == 0:
            time.sleep(0.005)
        started, left = time.perf_counter(), total
        cpu_before = redis_cpu_s(url)
        while unacknowledged(client, group) > 0:
            time.sleep(0.02)
        if store_cpu_us is not None:
            store_cpu_us.append((redis_cpu_s(url) - cpu_before) / left * 1e6)
        return left / (time.perf_counter() - started)
    finally:
        worker.terminate()
        worker.wait()


def _entries_read(client: redis.Redis, group: str) -> int:
    total = 0
    for number in range(SHARDS):
        for info in client.xinfo_groups(stream_key(number)):
            if info["name"].decode() == group:
                total += info.get("entries-read") or 0
    return total


def unacknowledged_total(client: redis.Redis) -> int:
    return sum(client.xlen(stream_key(n)) for n in range(SHARDS))


def _groups_missing(client: redis.Redis, group: str) -> bool:
    return any(
        not any(g["name"].decode() == group for g in client.xinfo_groups(stream_key(n)))
        for n in range(SHARDS)
        if client.exists(stream_key(n))
    )


def floor_rate(url: str, count: int, batch: int = 1000) -> float:
    """The same consumer-group reads and acknowledgements, JSON decoded, no state work."""
    client = redis.Redis.from_url(url)
    client.flushall()
    fill(client, entries(count))
    keys = [stream_key(n) for n in range(SHARDS)]
    for key in keys:
        client.xgroup_create(key, "floor", id="0", mkstream=True)
    done = 0
    started = time.perf_counter()
    while True:
        replies = client.xreadgroup("floor", "floor", {k: ">" for k in keys}, count=batch)
        if not replies:
            break
        pipe = client.pipeline(transaction=False)
        for key, items in replies:
            for _, fields in items:
                orjson.loads(fields[b"event"])
            pipe.xack(key, "floor", *[entry_id for entry_id, _ in items])
            done += len(items)
        pipe.execute()
    return done / (time.perf_counter() - started)


def freshness(url: str, rate: int, seconds: float) -> dict[str, float]:
    """Offer ``rate`` events/s stamped at append time; the worker's own reported lags."""
    client = redis.Redis.from_url(url)
    client.flushall()
    shard_count(client, SHARDS)
    name = f"fresh-{uuid.uuid4().hex[:6]}"
    worker = start_worker(url, name)
    samples: list[dict[str, float]] = []
    stop = threading.Event()

    def watch() -> None:
        while not stop.is_set():
            raw = client.get(ingest_status_key(name))
            if raw:
                status = orjson.loads(raw)
                if status.get("events") and status not in samples:
                    samples.append(status)
            time.sleep(0.5)

    watcher = threading.Thread(target=watch, daemon=True)
    try:
        time.sleep(2.0)  # the worker starts and takes its shards
        watcher.start()
        offer(client, rate, seconds)
        time.sleep(2.5)
    finally:
        stop.set()
        worker.terminate()
        worker.wait()
    steady = [s for s in samples if s["event_lag_p99_s"] is not None] or samples
    return {
        "event_lag_p50_s": max(s["event_lag_p50_s"] or 0 for s in steady)
        if steady
        else float("nan"),
        "event_lag_p99_s": max(s["event_lag_p99_s"] or 0 for s in steady)
        if steady
        else float("nan"),
        "append_lag_p99_s": max(s["append_lag_p99_s"] or 0 for s in steady)
        if steady
        else float("nan"),
        "reports": len(steady),
    }


def offer(client: redis.Redis, rate: int, seconds: float) -> None:
    """Append events at a steady rate, 100 times a second, each stamped with its send time."""
    tick = 0.01
    per_tick = max(1, int(rate * tick))
    started = time.perf_counter()
    sequence = 0
    while time.perf_counter() - started < seconds:
        now = time.time()
        batch = []
        for _ in range(per_tick):
            sequence += 1
            user = f"fresh-user-{sequence % 20_000}"
            body = orjson.dumps(
                {
                    "kind": "request",
                    "ts": now,
                    "id": f"f{sequence}",
                    "user": user,
                    "app": f"app-{sequence % 30}",
                }
            )
            batch.append((shard_of_key(user, SHARDS), body))
        append(client, batch)
        sequence_due = started + (sequence / rate)
        delay = sequence_due - time.perf_counter()
        if delay > 0:
            time.sleep(delay)


def run(ctx: Context) -> list[Result]:
    count = ctx.size(200_000, 4_000)
    runs = 1 if ctx.smoke else ctx.runs
    server = RedisServer().start()
    try:
        workers, floors, store_cpu_us, entry_bytes = [], [], [], []
        for _ in range(runs):
            floors.append(floor_rate(server.url, count))
            workers.append(worker_rate(server.url, count, store_cpu_us, entry_bytes))
        rate = ctx.size(10_000, 500)
        lag = freshness(server.url, rate, ctx.size(20, 3))
    finally:
        server.cleanup()
    return [
        Result(
            "stream worker",
            "events/s",
            Measure.of(workers),
            Measure.of(floors),
            ("min", 30_000),
            {
                "backlog": count,
                "floor": "XREADGROUP + XACK + orjson.loads",
                "store_cpu_us_per_event": store_cpu_us,
                "stream_bytes_per_entry": entry_bytes,
            },
        ),
        Result(
            "freshness lag p50 at fixed offered rate",
            "s",
            Measure.of([lag["event_lag_p50_s"]]),
            None,
            None,
            {"offered_events_per_s": rate, **lag},
        ),
        Result(
            "freshness lag p99 at fixed offered rate",
            "s",
            Measure.of([lag["event_lag_p99_s"]]),
            None,
            ("max", 1.0),
            {"offered_events_per_s": rate, **lag},
        ),
    ]
