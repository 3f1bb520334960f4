"""Lookups while the stream is being ingested: an open-loop lookup load beside a busy worker.

A bidder does not slow down because windvane is busy: auctions arrive at their own
rate. So lookups here are sent on a fixed schedule (open loop, 1,000/s), whatever
the answers do, and each latency is counted from the moment its request was due, so
a stall shows as the queue it builds (no coordinated omission). Meanwhile a separate
process appends 5,000 events/s to the stream and one ``windvane ingest`` worker applies
them to the same Redis the service reads. The report gives the lookup percentiles, the
share of lookups answered without stored features (``"stored": "missing"``, the
deadline ran out) and the worker's own event-to-state lag.

The targets (p99 within the service's default deadline, under 0.1% answered without
stored features) are absolute, not ratios: what a bidder needs of the service under
this load on this machine. They are reported as pass or short and never gate CI.
"""

from __future__ import annotations

import asyncio
import contextlib
import gc
import subprocess
import sys
import threading
import time
import uuid
from collections.abc import Sequence
from typing import Any
from urllib.parse import urlsplit

import orjson
import redis

from bench.common import ROOT, Context, Measure, Result
from bench.ingest_bench import SHARDS, start_worker
from bench.load import percentiles_ms
from bench.lookup_bench import DEFS, MODEL, ServerProcess, load_demo
from tests.redis_server import RedisServer
from windvane.ingest.event_stream import shard_count
from windvane.inputs.deadline import DEFAULT_DEADLINE_MS
from windvane.keys import ingest_status_key

LOOKUPS_PER_S = 1_000
EVENTS_PER_S = 5_000
MAX_CONNECTIONS = 64


def run(ctx: Context) -> list[Result]:
    lookup_rate = ctx.size(LOOKUPS_PER_S, 200)
    event_rate = ctx.size(EVENTS_PER_S, 500)
    duration_s = ctx.size(20, 3)
    runs = 1 if ctx.smoke else ctx.runs
    work = ctx.work / "mixed"
    work.mkdir(parents=True, exist_ok=True)
    samples: list[dict[str, Any]] = []
    with contextlib.ExitStack() as stack:
        server = RedisServer()
        stack.callback(server.cleanup)
        server.start()
        bodies = load_demo(server.url, ctx.size(200_000, 5_000), work)
        shard_count(redis.Redis.from_url(server.url), SHARDS)
        service = stack.enter_context(
            ServerProcess("windvane-mixed", service_args(server.url), work, "/v1/health")
        )
        service.start()
        for _ in range(runs):
            samples.append(one_run(server.url, service.url, bodies, lookup_rate, event_rate,
                                   duration_s))  # fmt: skip
    detail = {
        "lookups_per_s": lookup_rate,
        "events_per_s": event_rate,
        "duration_s": duration_s,
        "runs": runs,
        "deadline_ms": DEFAULT_DEADLINE_MS,
        "samples": samples,
    }
    deadline = DEFAULT_DEADLINE_MS

    def measure(name: str) -> Measure:
        return Measure.of([s[name] for s in samples])

    p99_target = ("max", deadline)
    missing_target = ("max", 0.1)
    lag_target = ("max", 1.0)
    return [
        Result("mixed: lookup p50 under ingest", "ms", measure("p50_ms"), None, None, detail),
        Result("mixed: lookup p99 under ingest", "ms", measure("p99_ms"), None, p99_target, detail),
        Result("mixed: lookup p99.9 under ingest", "ms", measure("p999_ms"), None, None, detail),
        Result(
            "mixed: service's own p99.9 (elapsed_ms)",
            "ms",
            measure("served_p999_ms"),
            None,
            ("max", deadline + 2),
            detail,
        ),
        Result(
            "mixed: service's longest lookup (elapsed_ms)",
            "ms",
            measure("served_max_ms"),
            None,
            None,
            detail,
        ),
        Result(
            "mixed: lookups without stored features",
            "%",
            measure("missing_pct"),
            None,
            missing_target,
            detail,
        ),
        Result(
            "mixed: ingest lag p99 (event to state)",
            "s",
            measure("ingest_lag_p99_s"),
            None,
            lag_target,
            detail,
        ),
    ]


def service_args(redis_url: str) -> list[str]:
    """The service as a bidder runs it: the default deadline, a default model, read-only."""
    return [
        sys.executable, "-m", "windvane", "serve", "--store", redis_url, "--defs", str(DEFS),
        "--read-only", "--default-model", MODEL,
    ]  # fmt: skip


def one_run(
    redis_url: str,
    lookup_url: str,
    bodies: Sequence[bytes],
    lookup_rate: int,
    event_rate: int,
    duration_s: float,
) -> dict[str, Any]:
    name = f"mixed-{uuid.uuid4().hex[:6]}"
    worker = start_worker(redis_url, name)
    offerer = subprocess.Popen(
        [sys.executable, "-m", "bench.mixed_bench", "offer", redis_url, str(event_rate),
         str(duration_s + 2)],
        cwd=ROOT,
    )  # fmt: skip
    lags: list[float] = []
    stop = threading.Event()
    client = redis.Redis.from_url(redis_url)

    def watch() -> None:
        while not stop.is_set():
            raw = client.get(ingest_status_key(name))
            if raw:
                lag = orjson.loads(raw).get("event_lag_p99_s")
                if lag is not None:
                    lags.append(float(lag))
            time.sleep(0.5)

    watcher = threading.Thread(target=watch, daemon=True)
    try:
        time.sleep(2.0)  # the worker takes its shards and the offered rate is steady
        watcher.start()
        latencies, answers, served_ms = asyncio.run(
            open_loop(lookup_url, bodies, lookup_rate, duration_s)
        )
    finally:
        stop.set()
        offerer.wait()
        worker.terminate()
        worker.wait()
        client.close()
    figures = percentiles_ms(latencies)
    # The service's own view (its answer's elapsed_ms, from the request's arrival): a gap
    # to the figures above is time spent before the application saw the request.
    served = percentiles_ms([round(ms * 1e6) for ms in served_ms if ms == ms])
    missing = sum(1 for stored in answers if stored != "ok")
    return {
        "lookups": len(answers),
        "missing": missing,
        "missing_pct": 100 * missing / max(len(answers), 1),
        "p50_ms": figures["p50"],
        "p99_ms": figures["p99"],
        "p999_ms": figures["p99.9"],
        "ingest_lag_p99_s": max(lags) if lags else float("nan"),
        "served_p99_ms": served["p99"],
        "served_p999_ms": served["p99.9"],
        "served_max_ms": max(served_ms) if served_ms else float("nan"),
    }


async def open_loop(
    url: str, bodies: Sequence[bytes], rate: int, duration_s: float
) -> tuple[list[int], list[str], list[float]]:
    """Send request i at start + i/rate; its latency runs from then to its whole answer."""
    parts = urlsplit(url)
    host, port = parts.hostname or "127.0.0.1", parts.port or 80
    requests = [
        b"POST %s HTTP/1.1\r\nHost: %s:%d\r\nContent-Type: application/json\r\n"
        b"Content-Length: %d\r\n\r\n%s" % (parts.path.encode(), host.encode(), port, len(b), b)
        for b in bodies
    ]
    idle: asyncio.Queue[tuple[asyncio.StreamReader, asyncio.StreamWriter]] = asyncio.Queue()
    opened = 0
    latencies: list[int] = []
    answers: list[str] = []
    served_ms: list[float] = []

    async def one(request: bytes, due_ns: int) -> None:
        nonlocal opened
        if idle.empty() and opened < MAX_CONNECTIONS:
            opened += 1
            idle.put_nowait(await asyncio.open_connection(host, port))
        reader, writer = await idle.get()
        writer.write(request)
        status, body = await read_answer(reader)
        latencies.append(time.perf_counter_ns() - due_ns)
        answer = orjson.loads(body) if status == 200 else {}
        answers.append(answer.get("stored", f"status {status}"))
        served_ms.append(float(answer.get("elapsed_ms", "nan")))
        idle.put_nowait((reader, writer))

    count = int(rate * duration_s)
    in_flight: set[asyncio.Task[None]] = set()
    # The generator's own pauses would count as the service's latency: no collector
    # passes over its thousands of finished requests while it runs.
    gc.collect()
    gc.disable()
    try:
        started = time.perf_counter_ns()
        for index in range(count):
            due = started + index * 1_000_000_000 // rate
            delay = (due - time.perf_counter_ns()) / 1e9
            if delay > 0:
                await asyncio.sleep(delay)
            task = asyncio.create_task(one(requests[index % len(requests)], due))
            in_flight.add(task)
            task.add_done_callback(in_flight.discard)
        await asyncio.gather(*in_flight)
    finally:
        gc.enable()
    while not idle.empty():
        _, writer = idle.get_nowait()
        writer.close()
    return latencies, answers, served_ms


async def read_answer(reader: asyncio.StreamReader) -> tuple[int, bytes]:
    head = await reader.readuntil(b"\r\n\r\n")
    length = 0
    for line in head.lower().split(b"\r\n")[1:]:
        if line.startswith(b"content-length:"):
            length = int(line[15:])
    return int(head[9:12]), await reader.readexactly(length)


def _offer_main(argv: Sequence[str]) -> None:
    """``python -m bench.mixed_bench offer URL RATE SECONDS``: the ingest load, in its own
    process so that appending never competes with the lookup load for one interpreter."""
    from bench.ingest_bench import offer

    url, rate, seconds = argv[0], int(argv[1]), float(argv[2])
    offer(redis.Redis.from_url(url), rate, seconds)


if __name__ == "__main__":
    if sys.argv[1:2] == ["offer"]:
        _offer_main(sys.argv[2:])
    else:
        raise SystemExit("usage: python -m bench.mixed_bench offer URL RATE SECONDS")
