"""Freshness of ingest: how long after an event (and after its append) its effect was stored."""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field


def percentile(values: list[float], q: float) -> float | None:
    """The q-quantile (0..1) by the nearest-rank method; None when empty."""
    if not values:
        return None
    ordered = sorted(values)
    rank = max(1, math.ceil(q * len(ordered)))
    return ordered[rank - 1]


@dataclass
class FreshnessWindow:
    """Lags and counts since the last report; ``report`` returns them and starts afresh."""

    started_s: float = field(default_factory=time.monotonic)
    events: int = 0
    dead_letters: int = 0
    skipped: int = 0
    event_lags_s: list[float] = field(default_factory=list)
    append_lags_s: list[float] = field(default_factory=list)
    max_samples: int = 20_000

    def record(self, event_ts_s: list[float], append_ms: list[int], written_s: float) -> None:
        self.events += len(event_ts_s)
        step = max(1, len(event_ts_s) * 2 // self.max_samples)
        for ts in event_ts_s[::step]:
            self.event_lags_s.append(written_s - ts)
        for ms in append_ms[::step]:
            self.append_lags_s.append(written_s - ms / 1000)
        if len(self.event_lags_s) > self.max_samples:
            del self.event_lags_s[: -self.max_samples]
            del self.append_lags_s[: -self.max_samples]

    def report(self) -> dict[str, float | int | None]:
        elapsed = max(time.monotonic() - self.started_s, 1e-9)
        numbers = {
            "events": self.events,
            "events_per_s": self.events / elapsed,
            "event_lag_p50_s": percentile(self.event_lags_s, 0.5),
            "event_lag_p99_s": percentile(self.event_lags_s, 0.99),
            "append_lag_p50_s": percentile(self.append_lags_s, 0.5),
            "append_lag_p99_s": percentile(self.append_lags_s, 0.99),
            "dead_letters": self.dead_letters,
            "skipped": self.skipped,
        }
        self.started_s = time.monotonic()
        self.events = self.dead_letters = self.skipped = 0
        self.event_lags_s = []
        self.append_lags_s = []
        return numbers
