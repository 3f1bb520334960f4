"""The demo log through the engine: every lookup answers and the features move as scripted."""

from __future__ import annotations

import time
from pathlib import Path

from tests.conftest import FEATUREDEFS
from tests.support import engine_for
from windvane.ingest.rejects import RejectsFile
from windvane.ingest.replay import replay
from windvane_demo.generate import build_log, write_lines

# The log ends at the current hour: keys expire in event time, so an old log would be gone.
END = time.time() // 3600 * 3600


def test_demo_log_replays_and_answers(tmp_path: Path) -> None:
    demo = build_log(seed=3, events=30_000, end_ts=END, hours=6)
    log = tmp_path / "demo.jsonl.gz"
    write_lines(demo.lines, str(log))
    engine = engine_for(FEATUREDEFS, "memory://demo-e2e")
    with RejectsFile(tmp_path / "rejects.jsonl") as rejects:
        stats = replay(engine, [str(log)], rejects)
    assert stats.rejected == demo.malformed
    assert stats.applied == len(demo.lines) - demo.malformed
    answers = [engine.lookup(request) for request in demo.lookups]
    shared = [a["features"] for a in answers]
    # Win rates move away from the prior mean 0.1 where the app had bids and wins.
    assert len({round(f["app_win_rate"], 6) for f in shared}) > 5
    assert all(0 < f["app_win_rate"] < 1 and 0 < f["app_ctr"] < 1 for f in shared)
    assert any(f["app_users_24h"] > 10 for f in shared)
    restricted = [a for a in answers if a["restricted"]]
    assert restricted
    assert all(a["features"]["imps_24h"] is None for a in restricted)
    assert any((a["features"]["imps_24h"] or 0) > 0 for a in answers)
