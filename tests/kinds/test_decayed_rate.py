"""Decayed rates against the closed-form sum, to 1e-9 relative.

Closed form (the definition of exponential decay with a half-life h): at lookup time t
an event at s weighs 2 ** (-(t - s) / h); the smoothed rate is the Beta-prior posterior
mean (alpha + sum of success weights) / (alpha + beta + sum of trial weights).
"""

from __future__ import annotations

import math
import random
import time
from pathlib import Path

from hypothesis import given
from hypothesis import strategies as st

from tests.support import engine_for, event, write_defs
from windvane.store import open_store

DEFS = """
[settings]
expire_margin = "30d"

[[feature]]
name = "win_rate"
kind = "decayed_rate"
key = "app"
successes = ["win"]
trials = ["bid"]
half_life = "{half_life}s"
prior = {{ alpha = {alpha}, beta = {beta} }}
"""


def closed_form(
    wins: list[float], bids: list[float], t: float, h: float, a: float, b: float
) -> float:
    success = math.fsum(2 ** (-(t - s) / h) for s in wins)
    trials = math.fsum(2 ** (-(t - s) / h) for s in bids)
    return (a + success) / (a + b + trials)


cases = st.fixed_dictionaries(
    {
        "half_life": st.sampled_from([60, 3600, 6 * 3600]),
        "alpha": st.sampled_from([1, 0.5, 3]),
        "beta": st.sampled_from([9, 199, 1.5]),
        "bids": st.lists(st.integers(min_value=0, max_value=6 * 3600 * 1000), max_size=80),
        "win_share": st.floats(min_value=0, max_value=1),
        "lateness_ms": st.integers(min_value=0, max_value=5 * 60 * 1000),
        "seed": st.integers(min_value=0, max_value=2**32 - 1),
        "batch": st.integers(min_value=1, max_value=40),
        "after_ms": st.integers(min_value=1, max_value=12 * 3600 * 1000),
    }
)


@given(case=cases)
def test_decayed_rate_matches_closed_form(case: dict, store_url: str, tmp_path: Path) -> None:
    defs = write_defs(
        tmp_path / "defs", DEFS.format(**{k: case[k] for k in ("half_life", "alpha", "beta")})
    )
    open_store(store_url).flush()
    engine = engine_for(defs, store_url)
    rng = random.Random(case["seed"])
    base = round(time.time()) - 6 * 3600
    bids = [base + ms / 1000 for ms in case["bids"]]
    wins = [s + 0.2 for s in bids if rng.random() < case["win_share"]]
    events = [event("bid", s, app="app") for s in bids] + [event("win", s, app="app") for s in wins]
    # Arrival order: event time plus up to a few minutes of lateness (late wins are normal).
    arrival = sorted(events, key=lambda e: e.ts_s + rng.uniform(0, case["lateness_ms"] / 1000))
    for start in range(0, len(arrival), case["batch"]):
        engine.apply(arrival[start : start + case["batch"]])
    t = max([*bids, *wins], default=base) + case["after_ms"] / 1000
    got = engine.lookup({"app": "app", "ts": t})["features"]["win_rate"]
    want = closed_form(wins, bids, t, case["half_life"], case["alpha"], case["beta"])
    # reference: closed-form exponential decay sum, relative tolerance 1e-9
    assert math.isclose(got, want, rel_tol=1e-9), (got, want)


def test_demo_definitions_follow_the_documented_formulas(store_url: str) -> None:
    # featuredefs/app.toml: app_win_rate = (1 + W) / (10 + B), half-life 1 h;
    # app_ctr = (1 + C) / (200 + I), half-life 6 h.
    from tests.conftest import FEATUREDEFS

    engine = engine_for(FEATUREDEFS, store_url)
    now = round(time.time())
    bids = [now - 3600 * k for k in (0.5, 1, 2)]
    wins = [now - 3600]
    imps = [now - 3600 * k for k in (1, 6, 7)]
    clicks = [now - 3600 * 6]
    engine.apply(
        [event("bid", s, app="app") for s in bids]
        + [event("win", s, app="app") for s in wins]
        + [event("impression", s, app="app") for s in imps]
        + [event("click", s, app="app") for s in clicks]
    )
    got = engine.lookup({"app": "app", "ts": now})["features"]
    # reference: the closed form, written out: 2^-1 for an event one half-life ago, etc.
    assert math.isclose(got["app_win_rate"], (1 + 0.5) / (10 + 2**-0.5 + 0.5 + 0.25), rel_tol=1e-12)
    assert math.isclose(
        got["app_ctr"], (1 + 0.5) / (200 + 2 ** (-1 / 6) + 0.5 + 2 ** (-7 / 6)), rel_tol=1e-12
    )


def test_no_events_gives_the_prior_mean(store_url: str) -> None:
    from tests.conftest import FEATUREDEFS

    engine = engine_for(FEATUREDEFS, store_url)
    got = engine.lookup({"app": "never-seen"})["features"]
    assert got["app_win_rate"] == 1 / 10
    assert got["app_ctr"] == 1 / 200
