"""Window counts, inflow rates and recency against an independent computation with pandas.

pandas (a general-purpose reference library) buckets the events with ``resample`` on
epoch-aligned bins; the window rule is the one the definitions document: an event at
s counts at t when s < t and floor(s/g) > floor(t/g) - W/g.
"""

from __future__ import annotations

import random
import time
from pathlib import Path

import pandas as pd
from hypothesis import given
from hypothesis import strategies as st

from tests.support import dump_state, engine_for, event, write_defs
from windvane.store import open_store

DEFS = """
[settings]
expire_margin = "30d"   # retention is tested on its own; here keys must outlive old test events

[[feature]]
name = "imps"
kind = "window_count"
key = "user"
events = ["impression"]
window = "{window}s"
granularity = "{granularity}s"

[[feature]]
name = "req_per_min"
kind = "inflow_rate"
key = "app"
events = ["request"]
window = "{window}s"
granularity = "{granularity}s"

[[feature]]
name = "since_imp"
kind = "recency"
key = "user"
events = ["impression"]
keep = "2d"
"""


def pandas_window_count(times_s: list[float], t_s: float, window_s: int, g_s: int) -> int:
    """Reference count: bucket with pandas, keep whole buckets of the trailing window."""
    if not times_s:
        return 0
    series = pd.Series(1, index=pd.to_datetime(times_s, unit="s")).sort_index()
    series = series[series.index < pd.to_datetime(t_s, unit="s")]
    if series.empty:
        return 0
    buckets = series.resample(f"{g_s}s", origin="epoch").sum()
    current = pd.to_datetime(t_s, unit="s").floor(f"{g_s}s")
    start = current - pd.Timedelta(seconds=window_s)
    return int(buckets[(buckets.index > start) & (buckets.index <= current)].sum())


def pandas_recency(times_s: list[float], t_s: float, keep_s: int) -> float | None:
    series = pd.Series(pd.to_datetime(times_s, unit="s"))
    before = series[series < pd.to_datetime(t_s, unit="s")]
    if before.empty:
        return None
    age = (pd.to_datetime(t_s, unit="s") - before.max()).total_seconds()
    return None if age > keep_s else age


streams = st.fixed_dictionaries(
    {
        "granularity": st.sampled_from([60, 300, 3600]),
        "span": st.integers(min_value=1, max_value=30),
        # Event times as whole milliseconds, the resolution windvane stores.
        "imps": st.lists(st.integers(min_value=0, max_value=10**9), max_size=60),
        "requests": st.lists(st.integers(min_value=0, max_value=10**9), max_size=60),
        "lookups": st.lists(st.integers(min_value=1, max_value=10**9), min_size=1, max_size=5),
        "seed": st.integers(min_value=0, max_value=2**32 - 1),
        "batch": st.integers(min_value=1, max_value=50),
    }
)


@given(case=streams)
def test_counts_match_pandas_with_late_events(case: dict, store_url: str, tmp_path: Path) -> None:
    granularity, span = case["granularity"], case["span"]
    window = granularity * span
    horizon_ms = int(window * 2.5 * 1000)
    base_s = round(time.time()) - window * 2.5
    defs = write_defs(tmp_path / "defs", DEFS.format(window=window, granularity=granularity))
    open_store(store_url).flush()
    engine = engine_for(defs, store_url)
    imps = [base_s + (ms % horizon_ms) / 1000 for ms in case["imps"]]
    reqs = [base_s + (ms % horizon_ms) / 1000 for ms in case["requests"]]
    events = [event("impression", s, user="u1", app="a1") for s in imps]
    events += [event("request", s, user="u1", app="a1") for s in reqs]
    # Arrival order is any permutation: late events of any age within the window count.
    random.Random(case["seed"]).shuffle(events)
    for start in range(0, len(events), case["batch"]):
        engine.apply(events[start : start + case["batch"]])
    latest = max(imps + reqs, default=base_s)
    for offset_ms in case["lookups"]:
        t = latest + (offset_ms % (window * 1500)) / 1000 + 0.001
        got = engine.lookup({"user": "u1", "app": "a1", "ts": t})["features"]
        # reference: pandas resample on epoch-aligned buckets
        assert got["imps"] == pandas_window_count(imps, t, window, granularity)
        expected_rate = pandas_window_count(reqs, t, window, granularity) / (window / 60)
        assert abs(got["req_per_min"] - expected_rate) < 1e-12
        expected_age = pandas_recency(imps, t, 2 * 86400)
        if expected_age is None:
            assert got["since_imp"] is None
        else:
            assert abs(got["since_imp"] - expected_age) < 1e-6


def test_state_is_independent_of_arrival_order_and_batching(store_url: str, tmp_path: Path) -> None:
    defs = write_defs(tmp_path / "defs", DEFS.format(window=3600, granularity=60))
    rng = random.Random(7)
    base_s = round(time.time()) - 7200
    events = [
        event(
            rng.choice(["impression", "request"]),
            base_s + rng.randrange(7_200_000) / 1000,
            user=f"u{rng.randrange(5)}",
            app=f"a{rng.randrange(3)}",
        )
        for _ in range(800)
    ]
    dumps = []
    for order_seed, batch in ((1, 1), (2, 37), (3, 800)):
        open_store(store_url).flush()
        engine = engine_for(defs, store_url)
        shuffled = list(events)
        random.Random(order_seed).shuffle(shuffled)
        for start in range(0, len(shuffled), batch):
            engine.apply(shuffled[start : start + batch])
        dumps.append(dump_state(engine))
    assert dumps[0] == dumps[1] == dumps[2]
    assert len(dumps[0]) == 5 + 3


def test_worked_example_of_the_window_rule(store_url: str, tmp_path: Path) -> None:
    # W = 5 min at g = 1 min; t0 is a minute boundary. Counts follow the documented rule
    # s < t and floor(s/g) > floor(t/g) - W/g, worked out by hand.
    defs = write_defs(tmp_path / "defs", DEFS.format(window=300, granularity=60))
    engine = engine_for(defs, store_url)
    t0 = (round(time.time()) // 60) * 60 - 600

    def imps_at(t: float) -> int:
        return engine.lookup({"user": "u", "app": "a", "ts": t})["features"]["imps"]

    engine.apply([event("impression", t0 + s, user="u", app="a") for s in (0, 59.999, 60, 299)])
    assert imps_at(t0 + 299.5) == 4  # buckets 0..4 all in window
    assert imps_at(t0 + 300) == 2  # bucket 0 leaves at t0 + 5 min
    # A late event from bucket -1 is already out of every window ending at or after
    # bucket 4, so it is dropped; the event at 300.5 opens bucket 5.
    engine.apply([event("impression", t0 + s, user="u", app="a") for s in (-0.001, 300.5)])
    assert imps_at(t0 + 301) == 3  # buckets 1..5: 60, 299, 300.5
    assert imps_at(t0 + 359.999) == 3
    assert imps_at(t0 + 360) == 2  # buckets 2..5: 299, 300.5
    assert imps_at(t0 + 600) == 0
