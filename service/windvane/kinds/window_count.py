"""Window count: how many events of given kinds a key had in a trailing window.

For a window W at granularity g, an event at time s counts at lookup time t when
``s < t`` and ``floor(s / g) > floor(t / g) - W / g``: whole buckets, so the window
slides in steps of g and the state stays W / g counts at most. Example: impressions of
a campaign to a user in the last hour, by minute (a frequency cap signal).
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


class WindowCountOptions(KeyedOptions):
    events: tuple[EventKind, ...]
    window: DurationS
    granularity: DurationS


class WindowCountFeature(Feature):
    kind = "window_count"

    def __init__(self, options: WindowCountOptions, state: BucketRingState) -> None:
        super().__init__(options)
        self.state = state
        self.ring = state
        self.window_s = options.window

    def read(self, raw: bytes | None, t_ms: int) -> int:
        return self.ring.total(raw, t_ms)

    def describe(self) -> str:
        return f"count in trailing {format_duration(self.window_s)}"


class WindowCountKind(FeatureKind):
    name = "window_count"
    options_model = WindowCountOptions
    states = (BucketRingState,)

    @classmethod
    def build(cls, options: WindowCountOptions, context: BuildContext) -> WindowCountFeature:
        ring = BucketRingState.for_window(options.events, options.window, options.granularity)
        return WindowCountFeature(options, ring)
