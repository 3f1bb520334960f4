"""Store memory per user and per app, for the demo feature set, from INFO memory before and after.

A demo log with at least a million distinct users, ending now (so that no key has
expired yet), is replayed into a fresh redis-server. Per app is what the app hashes
and their HyperLogLog buckets hold (MEMORY USAGE); per user is the rest of the growth
divided by the users. The largest key is found with MEMORY USAGE over every key.
"""

from __future__ import annotations

import time

import redis

from bench.common import Context, Measure, Result
from tests.redis_server import RedisServer
from windvane.definitions.plan import load_plan
from windvane.engine import Engine
from windvane.ingest.rejects import RejectsFile
from windvane.ingest.replay import replay
from windvane.store import open_store
from windvane_demo.generate import build_log, write_lines


def used_memory(client: redis.Redis) -> int:
    return int(client.info("memory")["used_memory"])


def run(ctx: Context) -> list[Result]:
    users = ctx.size(1_000_000, 3_000)
    events = ctx.size(2_200_000, 8_000)
    ctx.work.mkdir(parents=True, exist_ok=True)
    path = ctx.work / "memory.jsonl"
    demo = build_log(seed=47, events=events, end_ts=time.time() // 60 * 60, hours=24, users=users)
    write_lines(demo.lines, str(path))
    del demo
    server = RedisServer().start()
    try:
        client = redis.Redis.from_url(server.url)
        before = used_memory(client)
        engine = Engine(load_plan("featuredefs"), open_store(server.url), "main")
        with RejectsFile(ctx.work / "memory-rejects.jsonl") as rejects:
            replay(engine, [str(path)], rejects)
        after = used_memory(client)
        sizes = {"user": 0, "user+campaign": 0, "app": 0}
        counts = {"user": 0, "user+campaign": 0, "app": 0}
        largest = ("", 0)
        keys = list(client.scan_iter(match="wv:main:*", count=10_000))
        for start in range(0, len(keys), 5000):
            chunk = keys[start : start + 5000]
            pipe = client.pipeline(transaction=False)
            for key in chunk:
                pipe.memory_usage(key, samples=0)
            for key, size in zip(chunk, pipe.execute(), strict=True):
                name = key.decode()
                kind = "app" if "{a:" in name else ("user+campaign" if "}:c:" in name else "user")
                sizes[kind] += size or 0
                if name.endswith("}") or kind == "user+campaign":
                    counts[kind] += 1  # an app's HyperLogLog buckets are not apps
                if (size or 0) > largest[1]:
                    largest = (name, size or 0)
    finally:
        server.cleanup()
    growth = after - before
    distinct_users = counts["user"] or 1
    apps = counts["app"] or 1
    per_user = (growth - sizes["app"]) / distinct_users
    per_app = sizes["app"] / apps
    detail = {
        "users_with_state": counts["user"],
        "user_campaign_keys": counts["user+campaign"],
        "apps": counts["app"],
        "used_memory_growth_bytes": growth,
        "bytes_per_user_hash": sizes["user"] / (counts["user"] or 1),
        "bytes_per_user_campaign_key": sizes["user+campaign"] / (counts["user+campaign"] or 1),
        "largest_key": largest[0],
        "largest_key_bytes": largest[1],
        "events": events,
    }
    return [
        Result(
            "store memory per user", "bytes", Measure.of([per_user]), None, ("max", 300), detail
        ),
        Result("store memory per app", "bytes", Measure.of([per_app]), None, None, detail),
        Result("largest key", "bytes", Measure.of([float(largest[1])]), None, None, detail),
    ]
