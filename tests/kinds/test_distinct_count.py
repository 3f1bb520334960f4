"""Distinct users per app against the exact count.

Redis documents a standard error of 0.81% for its HyperLogLog, so on a real server the
estimate must be within 2% (about 2.5 standard errors) of the exact count; the embedded
store counts exactly.
"""

from __future__ import annotations

import random
import time

from tests.conftest import FEATUREDEFS
from tests.support import engine_for, event


def test_users_per_app_within_two_percent(store_url: str) -> None:
    engine = engine_for(FEATUREDEFS, store_url)
    rng = random.Random(11)
    now = round(time.time())
    old = [f"old-{i:05d}" for i in range(3000)]
    recent = [f"user-{i:05d}" for i in range(12_000)]
    events = [
        event("request", now - 26 * 3600 - rng.uniform(0, 3000), user=u, app="app") for u in old
    ]
    for user in recent + old[:1000]:  # a returning old user counts once
        for _ in range(rng.randint(1, 3)):
            events.append(event("request", now - rng.uniform(1, 22 * 3600), user=user, app="app"))
    rng.shuffle(events)
    for start in range(0, len(events), 2000):
        engine.apply(events[start : start + 2000])
    exact = len(recent) + 1000
    got = engine.lookup({"app": "app", "ts": now})["features"]["app_users_24h"]
    # reference: the exact distinct count; Redis's documented HyperLogLog error is 0.81%
    assert abs(got - exact) / exact < 0.02, (got, exact)


def test_window_boundary_of_hourly_buckets(store_url: str) -> None:
    engine = engine_for(FEATUREDEFS, store_url)
    hour = 3600
    t = (round(time.time()) // hour) * hour + 1800  # half past the current hour
    engine.apply(
        [
            event("request", t - 23 * hour - 1700, user="in-oldest-bucket", app="app"),
            event("request", t - 23 * hour - 1801, user="gone", app="app"),
            event("request", t - 60, user="fresh", app="app"),
        ]
    )
    # The window keeps hourly buckets b > floor(t/1h) - 24: the bucket 23 h before this one stays.
    assert engine.lookup({"app": "app", "ts": t})["features"]["app_users_24h"] == 2
