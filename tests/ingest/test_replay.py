"""Replay: a bad line is rejected whole with a reason, the rest applied; batches change nothing."""

from __future__ import annotations

import gzip
import random
from pathlib import Path

import orjson
import pytest

from tests.conftest import FEATUREDEFS
from tests.support import BAD_LINES, dump_state, engine_for, good_lines
from windvane.ingest.rejects import RejectsFile
from windvane.ingest.replay import replay
from windvane.store import open_store


def test_bad_lines_are_rejected_whole_and_the_rest_applied(store_url: str, tmp_path: Path) -> None:
    good = good_lines(300)
    mixed, expected_rejects = [], []
    for n, line in enumerate(good):
        mixed.append(line)
        if n % 25 == 0 and n // 25 < len(BAD_LINES):
            bad, field = BAD_LINES[n // 25]
            mixed.append(bad)
            expected_rejects.append((len(mixed), field, bad))
    log = tmp_path / "mixed.jsonl.gz"
    log.write_bytes(gzip.compress(b"\n".join(mixed) + b"\n"))
    clean = tmp_path / "clean.jsonl"
    clean.write_bytes(b"\n".join(good) + b"\n")

    engine = engine_for(FEATUREDEFS, store_url)
    with RejectsFile(tmp_path / "rejects.jsonl") as rejects:
        stats = replay(engine, [str(log)], rejects, batch_size=64)
    assert (stats.applied, stats.rejected) == (len(good), len(BAD_LINES))
    records = [orjson.loads(x) for x in (tmp_path / "rejects.jsonl").read_bytes().splitlines()]
    assert [(r["line"], r["field"], r["text"].encode()) for r in records] == expected_rejects
    assert all(r["file"] == str(log) and r["reason"] for r in records)
    mixed_state = dump_state(engine)

    open_store(store_url).flush()
    with RejectsFile(tmp_path / "none.jsonl") as rejects:
        replay(engine, [str(clean)], rejects, batch_size=1000)
    assert (tmp_path / "none.jsonl").read_bytes() == b""
    assert dump_state(engine) == mixed_state


@pytest.mark.parametrize("batches", [(1, 7, 5000)])
def test_batch_size_does_not_change_state(store_url: str, tmp_path: Path, batches: tuple) -> None:
    lines = good_lines(1500, seed=9)
    rng = random.Random(5)
    # A few minutes of disorder, as late wins and clicks arrive in practice.
    order = sorted(range(len(lines)), key=lambda n: n + rng.uniform(0, 240) * (rng.random() < 0.1))
    log = tmp_path / "log.jsonl"
    log.write_bytes(b"\n".join(lines[n] for n in order) + b"\n")
    engine = engine_for(FEATUREDEFS, store_url)
    dumps = []
    for size in batches:
        open_store(store_url).flush()
        with RejectsFile(tmp_path / "r.jsonl") as rejects:
            replay(engine, [str(log)], rejects, batch_size=size)
        dumps.append(dump_state(engine))
    assert dumps[0]
    assert all(d == dumps[0] for d in dumps)


def test_memory_and_redis_give_the_same_state(redis_server, tmp_path: Path) -> None:
    log = tmp_path / "log.jsonl"
    log.write_bytes(b"\n".join(good_lines(800, seed=21)) + b"\n")
    dumps = []
    for url in ("memory://same-state", redis_server.url):
        open_store(url).flush()
        engine = engine_for(FEATUREDEFS, url)
        with RejectsFile(tmp_path / "r.jsonl") as rejects:
            replay(engine, [str(log)], rejects, batch_size=100)
        dumps.append(dump_state(engine))
    assert dumps[0] == dumps[1]
