"""A trailing window of event counts in time buckets, stored as one short hash field.

The value is ``<newest bucket>:<count of newest>,<count of the one before>,...``, at most
``span`` counts, trailing zeros dropped. An increment for bucket b is added when b lies
within ``span`` buckets of the newest bucket seen, and dropped otherwise. The stored
value is therefore a function of the set of events alone, not of their order: late
events (within the window) count exactly, and any batching gives the same state.
"""

from __future__ import annotations

from typing import ClassVar

from windvane.durations import format_duration
from windvane.inputs.events import Event
from windvane.kinds.base import LuaHandler, State, check_events, check_window
from windvane.kinds.batch_writes import BUCKET_OPCODE, BatchWrites

_DECODE = """
if not s then return nil end
local sep = string.find(s, ':', 1, true)
local c = {}
for x in string.gmatch(string.sub(s, sep + 1), '[^,]+') do c[#c + 1] = tonumber(x) end
return {tonumber(string.sub(s, 1, sep - 1)), c}
"""

_APPLY = """
local b, n, span = tonumber(a[i + 1]), tonumber(a[i + 2]), tonumber(a[i + 3])
if not v then return {b, {n}}, true end
local top, c = v[1], v[2]
if b > top then
  local shift = b - top
  if shift >= span then
    c = {n}
  else
    local d = {n}
    for j = 2, shift do d[j] = 0 end
    for j = 1, math.min(#c, span - shift) do d[shift + j] = c[j] end
    c = d
  end
  return {b, c}, true
elseif top - b < span then
  local j = top - b + 1
  for m = #c + 1, j do c[m] = 0 end
  c[j] = c[j] + n
  return v, true
end
return v, false
"""

_ENCODE = """
local c = v[2]
local last = #c
while last > 0 and c[last] == 0 do last = last - 1 end
return string.format('%.0f', v[1]) .. ':' .. table.concat(c, ',', 1, last)
"""


class BucketRingState(State):
    """Counts of ``events`` per ``granularity_s`` bucket over ``span`` buckets."""

    LUA_HANDLERS: ClassVar[dict[str, LuaHandler]] = {
        BUCKET_OPCODE: LuaHandler(4, _DECODE, _APPLY, _ENCODE)
    }

    def __init__(self, events: frozenset[str], granularity_s: int, span: int) -> None:
        self.events = events
        self.granularity_s = granularity_s
        self.granularity_ms = granularity_s * 1000
        self.span = span
        self.retention_s = granularity_s * span

    @classmethod
    def for_window(
        cls, events: tuple[str, ...], window_s: int, granularity_s: int
    ) -> BucketRingState:
        """The ring for a window definition, or a FieldProblem naming the bad field."""
        return cls(check_events(events), granularity_s, check_window(window_s, granularity_s))

    @property
    def signature(self) -> str:
        return f"buckets({'|'.join(sorted(self.events))};{self.granularity_s};{self.span})"

    def update(self, event: Event, key: str, field: str, writes: BatchWrites) -> None:
        writes.count(key, field, event.ts_ms // self.granularity_ms, self.span)

    def total(self, raw: bytes | None, t_ms: int) -> int:
        """Events whose bucket b satisfies ``floor(t/g) - span < b <= floor(t/g)``."""
        if not raw:
            return 0
        head, _, rest = raw.partition(b":")
        newest = int(head)
        now = t_ms // self.granularity_ms
        # Entry j holds bucket newest - j; keep now - span < newest - j <= now.
        first = max(0, newest - now)
        stop = min(self.span, newest - now + self.span)
        if first >= stop or not rest:
            return 0
        counts = rest.split(b",")
        return sum(int(c) for c in counts[first:stop])

    def max_bytes(self, field: str) -> int:
        # Newest bucket index (up to 10 digits), then up to span counts of a few digits.
        return len(field) + 11 + 4 * self.span + 4

    def describe(self) -> str:
        return (
            f"bucketed count of {'/'.join(sorted(self.events))}: {self.span} x "
            f"{format_duration(self.granularity_s)}"
        )
