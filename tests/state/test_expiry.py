"""Data retention: every key expires after its longest window plus the margin, in event time."""

from __future__ import annotations

import time

from tests.conftest import FEATUREDEFS
from tests.support import dump_state, engine_for, event

HOUR_MS = 3_600_000


def test_each_key_expires_after_its_longest_window_plus_margin(store_url: str) -> None:
    engine = engine_for(FEATUREDEFS, store_url)
    now = round(time.time())
    engine.apply(
        [
            event("request", now - 100, user="u", app="a"),
            event("impression", now - 50, user="u", app="a", campaign="c"),
            event("impression", now - 80, user="u", app="a", campaign="c"),
        ]
    )
    state = dump_state(engine)
    latest_ms = (now - 50) * 1000
    # featuredefs: user keys keep 7 d (clicks_7d, secs_since_imp) + 1 h margin; the
    # user+campaign key 1 h (imps_1h) + 1 h; the app key 60 h (10 half-lives of app_ctr) + 1 h.
    assert state["wv:main:{u:u}"][2] == latest_ms + (7 * 24 + 1) * HOUR_MS
    assert state["wv:main:{u:u}:c:c"][2] == latest_ms + 2 * HOUR_MS
    assert state["wv:main:{a:a}"][2] == latest_ms + 61 * HOUR_MS
    # Each HyperLogLog bucket lives until it leaves the 24 h window, plus the margin.
    bucket = (now - 100) // 3600
    hll = [v for k, v in state.items() if v[0] == "hll"]
    assert [v[2] for v in hll] == [(bucket + 24) * HOUR_MS + HOUR_MS]


def test_expiry_never_moves_earlier_and_old_events_expire_at_once(store_url: str) -> None:
    engine = engine_for(FEATUREDEFS, store_url)
    now = round(time.time())
    engine.apply([event("impression", now - 10, user="u", campaign="c")])
    first = dump_state(engine)["wv:main:{u:u}:c:c"][2]
    engine.apply([event("impression", now - 1800, user="u", campaign="c")])  # late
    assert dump_state(engine)["wv:main:{u:u}:c:c"][2] == first
    # A replayed event older than a key's retention leaves nothing behind in that key:
    # 3 h exceeds the user+campaign key's 2 h, not the user key's 7 d 1 h.
    engine.apply([event("impression", now - 3 * 3600, user="old", campaign="c")])
    state = dump_state(engine)
    assert "wv:main:{u:old}:c:c" not in state
    assert "wv:main:{u:old}" in state
