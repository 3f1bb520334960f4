"""The registry of feature kinds; adding a kind is one module and one line here."""

from __future__ import annotations

from windvane.kinds.base import FeatureKind, State
from windvane.kinds.decayed_rate import DecayedRateKind
from windvane.kinds.distinct_count import DistinctCountKind
from windvane.kinds.inflow_rate import InflowRateKind
from windvane.kinds.local_clock import LocalClockKind
from windvane.kinds.recency import RecencyKind
from windvane.kinds.screen_fraction import ScreenFractionKind
from windvane.kinds.session import SessionKind
from windvane.kinds.window_count import WindowCountKind

KINDS: dict[str, type[FeatureKind]] = {
    kind.name: kind
    for kind in (
        SessionKind, LocalClockKind, ScreenFractionKind, WindowCountKind, RecencyKind,
        DecayedRateKind, InflowRateKind, DistinctCountKind,
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
