"""Recency: seconds since the key's latest event of given kinds (for example the last impression).

The state is the latest event time in milliseconds; a maximum is order-independent, so
late events are handled exactly. ``keep`` bounds how long the time is remembered, which
is also how long the key is retained for this feature.
"""

from __future__ import annotations

from typing import ClassVar

from windvane.durations import format_duration
from windvane.inputs.events import Event, EventKind
from windvane.kinds.base import (
    BuildContext,
    DurationS,
    Feature,
    FeatureKind,
    KeyedOptions,
    LuaHandler,
    State,
    check_events,
)
from windvane.kinds.batch_writes import BatchWrites

_DECODE = """
if not s then return nil end
return tonumber(s)
"""

_APPLY = """
local ts = tonumber(a[i + 1])
if (not v) or v < ts then return ts, true end
return v, false
"""

_ENCODE = """
return string.format('%.0f', v)
"""


class RecencyOptions(KeyedOptions):
    events: tuple[EventKind, ...]
    keep: DurationS


class RecencyState(State):
    LUA_HANDLERS: ClassVar[dict[str, LuaHandler]] = {"m": LuaHandler(2, _DECODE, _APPLY, _ENCODE)}

    def __init__(self, events: frozenset[str], keep_s: int) -> None:
        self.events = events
        self.retention_s = keep_s

    @property
    def signature(self) -> str:
        return f"latest({'|'.join(sorted(self.events))};{self.retention_s})"

    def update(self, event: Event, key: str, field: str, writes: BatchWrites) -> None:
        writes.op(key, "m", field, str(event.ts_ms))

    def max_bytes(self, field: str) -> int:
        return len(field) + 13 + 4

    def describe(self) -> str:
        return f"latest time of {'/'.join(sorted(self.events))}"


class RecencyFeature(Feature):
    kind = "recency"

    def __init__(self, options: RecencyOptions, state: RecencyState) -> None:
        super().__init__(options)
        self.state = state
        self.keep_ms = state.retention_s * 1000

    def read(self, raw: bytes | None, t_ms: int) -> float | None:
        if not raw:
            return None
        age_ms = t_ms - int(raw)
        if age_ms > self.keep_ms:
            return None
        return max(age_ms, 0) / 1000

    def describe(self) -> str:
        return f"seconds since latest, remembered {format_duration(self.keep_ms // 1000)}"


class RecencyKind(FeatureKind):
    name = "recency"
    options_model = RecencyOptions
    states = (RecencyState,)

    @classmethod
    def build(cls, options: RecencyOptions, context: BuildContext) -> RecencyFeature:
        return RecencyFeature(options, RecencyState(check_events(options.events), options.keep))
