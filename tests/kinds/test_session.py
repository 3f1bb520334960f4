"""Session depth and length against a pandas sessionization with the 30-minute gap rule.

Reference: pandas marks a new session wherever the gap between consecutive requests
exceeds 30 minutes (the inactivity rule is common practice in web analytics); the
lookup's own request counts as one more.
"""

from __future__ import annotations

import time

import pandas as pd
from hypothesis import given
from hypothesis import strategies as st

from tests.conftest import FEATUREDEFS
from tests.support import engine_for, event
from windvane.store import open_store

GAP_S = 30 * 60


def pandas_session(times_s: list[float], t_s: float) -> tuple[int, float]:
    series = pd.Series(sorted(s for s in times_s if s < t_s), dtype="float64")
    if series.empty or t_s - series.iloc[-1] > GAP_S:
        return 1, 0.0
    session_ids = (series.diff() > GAP_S).cumsum()
    current = series[session_ids == session_ids.iloc[-1]]
    return len(current) + 1, t_s - current.iloc[0]


@given(
    gaps=st.lists(
        st.one_of(
            st.integers(1_000, 600_000),
            st.integers(1_700_000, 1_900_000),
            st.integers(1_800_000, 7_200_000),
        ),
        max_size=40,
    ),
    after_ms=st.one_of(st.integers(1, 1_800_000), st.integers(1_800_001, 4_000_000)),
    batch=st.integers(1, 10),
)
def test_session_matches_pandas(gaps: list[int], after_ms: int, batch: int, store_url: str) -> None:
    open_store(store_url).flush()
    engine = engine_for(FEATUREDEFS, store_url)
    start = round(time.time()) - sum(gaps) / 1000 - 3600
    times, clock = [], start
    for gap in gaps:
        clock += gap / 1000
        times.append(clock)
    events = [event("request", s, user="u", app="a") for s in times]
    for i in range(0, len(events), batch):
        engine.apply(events[i : i + batch])
    t = (times[-1] if times else start) + after_ms / 1000
    got = engine.lookup({"user": "u", "app": "a", "ts": t})["features"]
    depth, length = pandas_session(times, t)
    # reference: pandas sessionization with the 30-minute gap
    assert got["session_depth"] == depth
    assert abs(got["session_length_s"] - length) < 1e-6


def test_gap_of_exactly_thirty_minutes_continues_the_session(store_url: str) -> None:
    engine = engine_for(FEATUREDEFS, store_url)
    t0 = round(time.time()) - 7200
    engine.apply(
        [event("request", t0, user="u", app="a"), event("request", t0 + GAP_S, user="u", app="a")]
    )
    at_gap = engine.lookup({"user": "u", "ts": t0 + 2 * GAP_S})["features"]
    after_gap = engine.lookup({"user": "u", "ts": t0 + 2 * GAP_S + 0.001})["features"]
    assert (at_gap["session_depth"], at_gap["session_length_s"]) == (3, 2 * GAP_S)
    assert (after_gap["session_depth"], after_gap["session_length_s"]) == (1, 0.0)


def test_slightly_late_request_extends_the_session(store_url: str) -> None:
    engine = engine_for(FEATUREDEFS, store_url)
    t0 = round(time.time()) - 3600
    engine.apply([event("request", t0 + s, user="u") for s in (100, 200, 50)])
    got = engine.lookup({"user": "u", "ts": t0 + 300})["features"]
    assert (got["session_depth"], got["session_length_s"]) == (4, 250.0)
