"""Inflow rate: events per minute over a trailing window, a pacing signal.

It is a window count divided by the window's length in minutes, so it shares the
bucketed state (and its exactness for late events) with ``window_count``; an inflow
rate and a window count over the same events and buckets share one stored field.
"""

from __future__ import annotations

from windvane.durations import format_duration
from windvane.inputs.events import EventKind
from windvane.kinds.base import (
    BuildContext,
    DurationS,
    Feature,
    FeatureKind,
    KeyedOptions,
)
from windvane.kinds.bucket_ring import BucketRingState


class InflowRateOptions(KeyedOptions):
    events: tuple[EventKind, ...]
    window: DurationS
    granularity: DurationS = 60


class InflowRateFeature(Feature):
    kind = "inflow_rate"

    def __init__(self, options: InflowRateOptions, state: BucketRingState) -> None:
        super().__init__(options)
        self.state = state
        self.ring = state
        self.minutes = options.window / 60

    def read(self, raw: bytes | None, t_ms: int) -> float:
        return self.ring.total(raw, t_ms) / self.minutes

    def describe(self) -> str:
        return f"events per minute over trailing {format_duration(round(self.minutes * 60))}"


class InflowRateKind(FeatureKind):
    name = "inflow_rate"
    options_model = InflowRateOptions
    states = (BucketRingState,)

    @classmethod
    def build(cls, options: InflowRateOptions, context: BuildContext) -> InflowRateFeature:
        ring = BucketRingState.for_window(options.events, options.window, options.granularity)
        return InflowRateFeature(options, ring)
