"""LMT and COPPA: such events leave no per-user state, such lookups get no per-user features.

OpenRTB 2.5 defines ``device.lmt`` (section 3.2.18, 1 = tracking limited by the user) and
``regs.coppa`` (section 3.2.3, 1 = subject to COPPA); windvane takes both as flags on
events and lookup requests.
"""

from __future__ import annotations

import time

import pytest

from tests.conftest import FEATUREDEFS
from tests.support import dump_state, engine_for, event

NOW = round(time.time())
PER_USER = ("session_depth", "session_length_s", "imps_24h", "clicks_7d", "secs_since_imp")


def auction(user: str, flags: dict, offset: float) -> list:
    common = {"user": user, "app": "kids-app", "campaign": "camp", **flags}
    return [
        event("request", NOW - offset, **common),
        event("bid", NOW - offset + 0.1, price=1.0, **common),
        event("win", NOW - offset + 0.2, price=0.8, **common),
        event("impression", NOW - offset + 1, **common),
        event("click", NOW - offset + 5, **common),
    ]


@pytest.mark.parametrize("flags", [{"device": {"lmt": 1}}, {"coppa": 1}])
def test_restricted_events_leave_no_per_user_state(store_url: str, flags: dict) -> None:
    engine = engine_for(FEATUREDEFS, store_url)
    engine.apply(auction("restricted-user", flags, 600) + auction("restricted-user", flags, 300))
    keys = list(dump_state(engine))
    assert keys, "app-level state must still be written"
    assert not [k for k in keys if "{u:" in k]
    # App-level counts include the restricted auctions; distinct users leave them out.
    got = engine.lookup({"app": "kids-app", "ts": NOW})["features"]
    assert got["app_win_rate"] > 1 / 10
    assert got["app_users_24h"] == 0


def test_unrestricted_events_do_write_per_user_state(store_url: str) -> None:
    engine = engine_for(FEATUREDEFS, store_url)
    engine.apply(auction("open-user", {"device": {"lmt": 0}, "coppa": 0}, 600))
    assert [k for k in dump_state(engine) if "{u:open-user}" in k]
    got = engine.lookup({"app": "kids-app", "ts": NOW})["features"]
    assert got["app_users_24h"] == 1


@pytest.mark.parametrize("flags", [{"device": {"lmt": 1}}, {"coppa": 1}])
def test_restricted_lookup_returns_no_per_user_features(store_url: str, flags: dict) -> None:
    engine = engine_for(FEATUREDEFS, store_url)
    engine.apply(auction("user-1", {}, 600))
    open_answer = engine.lookup(
        {"user": "user-1", "app": "kids-app", "ts": NOW, "campaigns": ["camp"]}
    )
    assert open_answer["features"]["imps_24h"] == 1
    answer = engine.lookup(
        {"user": "user-1", "app": "kids-app", "ts": NOW, "campaigns": ["camp"], **flags}
    )
    assert answer["restricted"] is True
    assert all(answer["features"][name] is None for name in PER_USER)
    assert answer["campaigns"]["camp"]["imps_1h"] is None
    # Request-time and app features are contextual and still answered.
    assert answer["features"]["local_hour"] is not None
    assert answer["features"]["app_win_rate"] is not None
