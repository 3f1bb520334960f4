"""Session: depth and length of the user's current session, with an inactivity gap.

A session is a run of requests with no pause longer than ``gap``; a 30-minute gap is
common practice in web analytics. The state is ``start:last:depth`` in milliseconds.
A lookup is itself a request, so it counts as one: depth is the stored depth plus one
while the session is current, and 1 (a new session) otherwise.

Requests arrive in order in practice (they are the first stage of an auction); a
request older than the session start but within ``gap`` of it extends the session
backwards, and one older still belongs to an earlier session and is ignored.
"""

from __future__ import annotations

from typing import ClassVar, Literal

from windvane.durations import format_duration
from windvane.inputs.events import Event
from windvane.kinds.base import (
    DECODE_THREE_NUMBERS,
    BuildContext,
    DurationS,
    Feature,
    FeatureKind,
    KeyedOptions,
    LuaHandler,
    State,
)
from windvane.kinds.batch_writes import BatchWrites

_APPLY = """
local ts, gap = tonumber(a[i + 1]), tonumber(a[i + 2])
if (not v) or ts - v[2] > gap then
  return {ts, ts, 1}, true
elseif ts >= v[1] then
  v[3] = v[3] + 1
  if ts > v[2] then v[2] = ts end
  return v, true
elseif v[1] - ts <= gap then
  v[1], v[3] = ts, v[3] + 1
  return v, true
end
return v, false
"""

_ENCODE = """
return string.format('%.0f:%.0f:%.0f', v[1], v[2], v[3])
"""


class SessionOptions(KeyedOptions):
    gap: DurationS = 1800
    value: Literal["depth", "length_s"]


class SessionState(State):
    LUA_HANDLERS: ClassVar[dict[str, LuaHandler]] = {
        "s": LuaHandler(3, DECODE_THREE_NUMBERS, _APPLY, _ENCODE)
    }

    def __init__(self, gap_s: int) -> None:
        self.events = frozenset({"request"})
        self.gap_s = gap_s
        self.gap_ms = gap_s * 1000
        self._gap_arg = str(self.gap_ms)
        self.retention_s = gap_s

    @property
    def signature(self) -> str:
        return f"session({self.gap_s})"

    def update(self, event: Event, key: str, field: str, writes: BatchWrites) -> None:
        writes.op(key, "s", field, str(event.ts_ms), self._gap_arg)

    def current(self, raw: bytes | None, t_ms: int) -> tuple[int, int] | None:
        """(start_ms, depth) of the session the lookup at ``t_ms`` continues, or None."""
        if not raw:
            return None
        start, last, depth = raw.split(b":")
        if t_ms - int(last) > self.gap_ms:
            return None
        return int(start), int(depth)

    def max_bytes(self, field: str) -> int:
        return len(field) + 32 + 4

    def describe(self) -> str:
        return f"session with {format_duration(self.gap_s)} gap"


class SessionFeature(Feature):
    kind = "session"

    def __init__(self, options: SessionOptions, state: SessionState) -> None:
        super().__init__(options)
        self.state = state
        self.session = state
        self.value = options.value

    def read(self, raw: bytes | None, t_ms: int) -> int | float:
        current = self.session.current(raw, t_ms)
        if self.value == "depth":
            return 1 if current is None else current[1] + 1
        return 0.0 if current is None else max(t_ms - current[0], 0) / 1000

    def describe(self) -> str:
        return f"session {self.value}"


class SessionKind(FeatureKind):
    name = "session"
    options_model = SessionOptions
    states = (SessionState,)

    @classmethod
    def build(cls, options: SessionOptions, context: BuildContext) -> SessionFeature:
        return SessionFeature(options, SessionState(options.gap))
