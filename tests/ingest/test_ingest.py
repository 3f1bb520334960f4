"""Streaming ingest: freshness, exactly-once effect across SIGKILLs and restarts, poison entries."""

from __future__ import annotations

import io
import random
import time
from pathlib import Path

import httpx
import orjson
import redis

from tests.conftest import FEATUREDEFS
from tests.ingest_process import IngestProcess
from tests.redis_server import RedisServer
from tests.service_process import ServiceProcess
from tests.support import compare_generations, engine_for, event, wait_until
from windvane.engine import Engine
from windvane.ingest.event_stream import append, shard_count, shard_of
from windvane.ingest.rejects import RejectsFile
from windvane.ingest.replay import replay
from windvane.ingest.worker import IngestSettings, IngestWorker
from windvane.inputs.events import parse_event_line
from windvane.keys import DEAD_LETTER_KEY, KeyLayout, stream_key
from windvane.store import open_store
from windvane_demo.generate import build_log, write_lines

TOKEN = "ingest-token"
FAST = ("--lease-ms", "1000", "--claim-idle-ms", "1000", "--status-every", "1")


def drained(client: redis.Redis, group: str = "gen-main") -> bool:
    """Every entry of every shard delivered to the group and acknowledged.

    Compares the group's last delivered id with the stream's last id rather than
    reading the group's lag, which Redis may report as unknown after a restart.
    """
    shards = int(client.get("wv:events:shards") or 0)
    for number in range(shards):
        key = stream_key(number)
        if not client.exists(key):
            continue
        last = client.xinfo_stream(key)["last-generated-id"]
        groups = {g["name"].decode(): g for g in client.xinfo_groups(key)}
        info = groups.get(group)
        if info is None or info["last-delivered-id"] != last or info["pending"] != 0:
            return False
    return True


def unread(client: redis.Redis, group: str = "gen-main") -> int:
    """Entries the group has not acknowledged yet, over all shards."""
    total = 0
    for number in range(int(client.get("wv:events:shards") or 0)):
        key = stream_key(number)
        length = client.xlen(key)
        for info in client.xinfo_groups(key):
            if info["name"].decode() == group:
                read = info.get("entries-read")
                total += int(info["pending"]) + (length - int(read) if read is not None else 0)
    return total


def demo_lines(events: int, seed: int, hours: float = 1.5) -> list[bytes]:
    """A demo log of the last ``hours``: every event stays well inside its keys' retention
    (two hours at the shortest) while the test runs, so live and clean state can match."""
    end = time.time() // 60 * 60
    return build_log(seed=seed, events=events, end_ts=end, hours=hours).lines


def send(client: redis.Redis, lines: list[bytes], batch: int = 2000) -> list[bytes]:
    """Append the valid lines (as ``windvane send`` does); returns them in order."""
    shards = shard_count(client)
    valid, entries = [], []
    for line in lines:
        try:
            parsed = parse_event_line(line)
        except Exception:
            continue
        valid.append(line)
        entries.append((shard_of(parsed, shards), line))
    for start in range(0, len(entries), batch):
        append(client, entries[start : start + batch])
    return valid


def clean_replay(url: str, lines: list[bytes], tmp_path: Path, generation: str) -> Engine:
    log = tmp_path / f"{generation}.jsonl"
    log.write_bytes(b"\n".join(lines) + b"\n")
    engine = Engine(engine_for(FEATUREDEFS, url).plan, open_store(url), generation)
    with RejectsFile(tmp_path / f"{generation}.rejects") as rejects:
        stats = replay(engine, [str(log)], rejects, batch_size=3000)
    assert stats.rejected == 0
    return engine


def test_posted_events_are_visible_in_lookups_within_a_second(redis_server) -> None:
    open_store(redis_server.url).flush()
    worker = IngestProcess(redis_server.url, redis_server.url, "--status-every", "1").start()
    try:
        args = ("--store", redis_server.url, "--defs", str(FEATUREDEFS), "--deadline-ms", "2000")
        with ServiceProcess(*args, token=TOKEN) as svc, httpx.Client(base_url=svc.url) as client:
            auth = {"Authorization": f"Bearer {TOKEN}"}
            for round_ in range(3):
                now = time.time()
                user = f"fresh-user-{round_}"
                events = [
                    {
                        "kind": "request",
                        "ts": now - 1,
                        "id": f"a{round_}",
                        "user": user,
                        "app": "app",
                    },
                    {
                        "kind": "impression",
                        "ts": now - 0.5,
                        "id": f"a{round_}",
                        "user": user,
                        "app": "app",
                        "campaign": "camp",
                    },
                    {"kind": "impression", "ts": "yesterday", "id": "bad"},
                ]
                posted = client.post("/v1/events", json=events, headers=auth)
                assert posted.status_code == 200, posted.text
                assert posted.json() == {
                    "accepted": 2,
                    "rejected": [
                        {
                            "index": 2,
                            "field": "ts",
                            "reason": posted.json()["rejected"][0]["reason"],
                        }
                    ],
                }

                def visible(user: str = user) -> bool:
                    answer = client.post("/v1/lookup", json={"user": user, "campaigns": ["camp"]})
                    return answer.json()["campaigns"]["camp"]["imps_1h"] == 1

                # The freshness promise of the service: state within a second of the POST.
                assert wait_until(visible, timeout_s=1.0), worker.output()
            lines = b'{"kind":"request","ts":1796000000,"id":"x","user":"u"}\nnot json\n'
            answer = client.post("/v1/events", content=lines, headers=auth).json()
            assert answer["accepted"] == 1
            assert answer["rejected"][0]["index"] == 1
            unauthorized = client.post("/v1/events", json=[], headers={})
            assert unauthorized.status_code == 401
            assert wait_until(lambda: client.get("/v1/health").json()["ingest"], timeout_s=5)
            health = client.get("/v1/health").json()
            assert health["ingest"]
            assert health["ingest"][0]["worker"].startswith("worker-")
    finally:
        worker.stop()


def test_sigkilled_workers_leave_exactly_the_state_of_a_clean_replay(tmp_path: Path) -> None:
    server = RedisServer().start()
    workers: list[IngestProcess] = []
    try:
        client = redis.Redis.from_url(server.url)
        shard_count(client, 4)
        lines = demo_lines(210_000, seed=5)
        rng = random.Random(17)
        options = (*FAST, "--batch", "2000")
        workers = [IngestProcess(server.url, server.url, *options).start() for _ in range(2)]
        sent: list[bytes] = []
        for start in range(0, len(lines), 30_000):
            sent += send(client, lines[start : start + 30_000])
        kills = 0
        every = list(workers)
        # Kill a worker that is up and working at a random moment, again and again.
        while not drained(client) and kills < 60:
            # A sleep, not a wait: the random pause is what makes the kill moments random.
            time.sleep(rng.uniform(0.1, 0.6))
            ready = [n for n, w in enumerate(workers) if time.monotonic() - w.started_s > 1.5]
            if not ready:
                continue
            victim = rng.choice(ready)
            workers[victim].kill()
            kills += 1
            workers[victim] = IngestProcess(server.url, server.url, *options).start()
            every.append(workers[victim])
        assert len(sent) >= 200_000
        assert wait_until(lambda: drained(client), timeout_s=240, step_s=0.5), [
            w.output() for w in workers
        ]
        logs = "".join(w.output() for w in every)
        # The crashes did leave applied-but-unacknowledged entries that were delivered again.
        assert logs.count("an earlier owner left unacknowledged") >= 3
        live = Engine(engine_for(FEATUREDEFS, server.url).plan, open_store(server.url), "main")
        clean = clean_replay(server.url, sent, tmp_path, "clean")
        problems = compare_generations(live, clean)
        assert problems == [], problems[:20]
        assert kills >= 10
        assert len(list(live.store.scan_keys(live.layout.pattern()))) > 10_000
    finally:
        for worker in workers:
            worker.kill()
        server.cleanup()


def test_store_restart_during_ingest_loses_and_doubles_nothing(
    redis_server, tmp_path: Path
) -> None:
    # Append-only persistence with fsync on every write: Redis documents that the default
    # everysec policy may lose up to a second of writes on a crash.
    server = RedisServer(appendonly=True).start()
    worker: IngestProcess | None = None
    rng = random.Random(3)
    try:
        client = redis.Redis.from_url(server.url)
        shard_count(client, 4)
        lines = demo_lines(80_000, seed=8)
        chunks = [lines[i : i + 20_000] for i in range(0, len(lines), 20_000)]
        sent: list[bytes] = []
        worker = IngestProcess(server.url, server.url, *FAST, "--batch", "2000").start()
        for outage, chunk in enumerate(chunks):
            # A fresh backlog, the worker busy with it, then the store dies under it.
            sent += send(client, chunk)
            backlog = unread(client)
            wait_until(
                lambda backlog=backlog, client=client: unread(client) < backlog - 1000,
                timeout_s=30,
            )
            # Sleeps, not waits: a random moment to crash at, then an outage that lasts
            # real time so the worker meets an unreachable store.
            time.sleep(rng.uniform(0.0, 0.05))
            if outage == len(chunks) - 1:
                server.stop()
            else:
                server.kill()
            time.sleep(rng.uniform(1.0, 2.0))
            server.start()
            client = redis.Redis.from_url(server.url)
        client = redis.Redis.from_url(server.url)
        assert wait_until(lambda: drained(client), timeout_s=120, step_s=0.5), worker.output()
        output = worker.output()
        assert "unreachable" in output
        assert "answer again; resuming" in output
        assert "Traceback" not in output
        live = Engine(engine_for(FEATUREDEFS, server.url).plan, open_store(server.url), "main")
        # The clean replay goes to the fixture's plain server: fsync-always is not under test.
        open_store(redis_server.url).flush()
        clean = clean_replay(redis_server.url, sent, tmp_path, "clean")
        assert compare_generations(live, clean) == []
    finally:
        if worker is not None:
            worker.kill()
        server.cleanup()


def test_poison_entries_go_to_the_dead_letter_stream_and_the_shard_flows(redis_server) -> None:
    open_store(redis_server.url).flush()
    client = redis.Redis.from_url(redis_server.url)
    shards = shard_count(client, 4)
    now = time.time()
    good = event("impression", now - 5, user="poison-user", app="app", campaign="camp")
    shard = shard_of(good, shards)
    client.xadd(stream_key(shard), {b"event": b'{"kind": "impression", "ts": '})
    client.xadd(stream_key(shard), {b"event": b'{"kind": "bidd", "ts": 1796000000, "id": "x"}'})
    client.xadd(stream_key(shard), {b"something": b"else"})
    body = orjson.dumps(
        {
            "kind": "impression",
            "ts": now - 5,
            "id": "g",
            "user": "poison-user",
            "app": "app",
            "campaign": "camp",
        }
    )
    client.xadd(stream_key(shard), {b"event": body})
    worker = IngestProcess(redis_server.url, redis_server.url, "--status-every", "1").start()
    try:
        assert wait_until(lambda: drained(client), timeout_s=20), worker.output()
        dead = client.xrange(DEAD_LETTER_KEY)
        assert len(dead) == 3
        reasons = [(f[b"field"], f[b"reason"]) for _, f in dead]
        assert reasons[0][0] == b""
        assert b"not valid JSON" in reasons[0][1]
        assert reasons[1][0] == b"kind"
        assert dead[1][1][b"event"] == b'{"kind": "bidd", "ts": 1796000000, "id": "x"}'
        assert all(f[b"shard"] == str(shard).encode() for _, f in dead)
        engine = engine_for(FEATUREDEFS, redis_server.url)
        answer = engine.lookup({"user": "poison-user", "campaigns": ["camp"], "ts": now})
        assert answer["campaigns"]["camp"]["imps_1h"] == 1
        assert wait_until(lambda: "dead letters 3" in worker.output(), timeout_s=5)
    finally:
        worker.stop()


def test_generation_rebuild_never_disturbs_lookups_until_the_switch(
    redis_server, tmp_path: Path
) -> None:
    url = redis_server.url
    open_store(url).flush()
    first, second = tmp_path / "a.jsonl.gz", tmp_path / "b.jsonl.gz"
    end = time.time() // 3600 * 3600
    demo_a = build_log(seed=21, events=20_000, end_ts=end, hours=4)
    write_lines(demo_a.lines, str(first))
    write_lines(build_log(seed=22, events=40_000, end_ts=end, hours=4).lines, str(second))
    base = Engine(engine_for(FEATUREDEFS, url).plan, open_store(url), "main")
    with RejectsFile(tmp_path / "r.jsonl") as rejects:
        replay(base, [str(first)], rejects)
    requests = [dict(r, ts=end) for r in demo_a.lookups[:15]]
    expected_before = [base.lookup(r) for r in requests]
    args = ("--store", url, "--defs", str(FEATUREDEFS), "--read-only", "--deadline-ms", "2000")
    with ServiceProcess(*args) as svc, httpx.Client(base_url=svc.url, timeout=5) as client:

        def answers() -> list[dict]:
            out = []
            for request in requests:
                response = client.post("/v1/lookup", json=request)
                assert response.status_code == 200, response.text
                out.append({k: v for k, v in response.json().items() if k != "elapsed_ms"})
            return out

        assert answers() == expected_before
        rebuilt = Engine(base.plan, open_store(url), "g2")
        with RejectsFile(tmp_path / "r2.jsonl") as rejects:
            for chunk_start in range(0, 3):
                replay(
                    rebuilt, [str(second)], rejects, batch_size=4000
                ) if chunk_start == 0 else None
                assert answers() == expected_before  # still the active generation, unchanged
        expected_after = [rebuilt.lookup(r) for r in requests]
        assert expected_after != expected_before
        from windvane.store.generations import Generations

        generations = Generations(open_store(url))
        assert {g["name"] for g in generations.list()} == {"main", "g2"}
        generations.activate("g2")
        # The service follows the active generation within a second.
        wait_until(lambda: answers() == expected_after, timeout_s=1.0)
        assert answers() == expected_after
        assert client.get("/v1/health").json()["generation"] == "g2"
        dropped = generations.drop("main")
        assert dropped > 0
        assert not list(open_store(url).scan_keys(KeyLayout("main").pattern()))
        assert answers() == expected_after


class FlakyAcknowledgements(IngestWorker):
    """A worker whose acknowledgements fail after the state write, again and again."""

    def __init__(self, *args: object, rng: random.Random, **kwargs: object) -> None:
        super().__init__(*args, **kwargs)  # type: ignore[arg-type]
        self.rng = rng
        self.failures = 0

    def acknowledge(self, done) -> None:  # type: ignore[no-untyped-def]
        if self.rng.random() < 0.25:
            self.failures += 1
            raise redis.exceptions.ConnectionError("acknowledgement lost (injected)")
        super().acknowledge(done)


def test_writes_repeated_after_lost_acknowledgements_count_once(
    redis_server, tmp_path: Path
) -> None:
    url = redis_server.url
    open_store(url).flush()
    client = redis.Redis.from_url(url)
    shard_count(client, 4)
    sent = send(client, demo_lines(30_000, seed=31))
    engine = Engine(engine_for(FEATUREDEFS, url).plan, open_store(url), "main")
    settings = IngestSettings(
        batch=200, block_ms=10, lease_ms=2000, claim_idle_ms=200, status_every_s=3600, name="flaky"
    )
    worker = FlakyAcknowledgements(
        engine, client, settings, out=io.StringIO(), rng=random.Random(2)
    )
    worker.run(stop=lambda: drained(client))
    assert worker.failures >= 10
    clean = clean_replay(url, sent, tmp_path, "clean")
    assert compare_generations(engine, clean) == []
