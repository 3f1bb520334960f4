"""The registry of feature kinds; adding a kind is one module and one line here."""

from __future__ import annotations

from windvane.kinds.base import FeatureKind, State
from windvane.kinds.decayed_rate import DecayedRate
from windvane.kinds.distinct_count import DistinctCount
from windvane.kinds.inflow_rate import InflowRate
from windvane.kinds.local_clock import LocalClock
from windvane.kinds.recency import Recency
from windvane.kinds.screen_fraction import ScreenFraction
from windvane.kinds.session import Session
from windvane.kinds.window_count import WindowCount

KINDS: dict[str, type[FeatureKind]] = {
    kind.name: kind
    for kind in (
        Session, LocalClock, ScreenFraction, WindowCount, Recency, DecayedRate, InflowRate,
        DistinctCount,
    )
}  # fmt: skip


def state_classes() -> list[type[State]]:
    """Every state class of every kind, each once, for building the update script."""
    seen: dict[type[State], None] = {}
    for kind in KINDS.values():
        for state in kind.states:
            seen.setdefault(state)
    return list(seen)


__all__ = ["KINDS", "FeatureKind", "state_classes"]
