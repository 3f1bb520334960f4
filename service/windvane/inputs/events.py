"""Events from the bidder: request, bid, win, impression and click, one JSON object each.

An event is validated whole before anything of it is applied, so a bad line is
rejected cleanly (``BadEvent`` names the field) and never half-counted. Unknown extra
fields are ignored, so producers can add their own without breaking replay.

Replays and stream workers parse every event, so a line is decoded and checked in one
pass by msgspec against the ``Event`` type; only the time needs Python afterwards.
"""

from __future__ import annotations

from typing import Annotated, Literal, get_args

import msgspec
from msgspec import Meta, Struct

from windvane.errors import BadEvent
from windvane.inputs.event_time import EARLIEST_S, LATEST_S, parse_time_s
from windvane.inputs.rtb_objects import (
    Device,
    Flag,
    Geo,
    Identifier,
    Slot,
    check_ids,
    decode_checked,
    unsafe_id,
    validation_problem,
)

# The event kinds, spelled once: the type checks them while decoding, the tuple lists them.
EventKind = Literal["request", "bid", "win", "impression", "click"]
EVENT_KINDS: tuple[str, ...] = get_args(EventKind)

# Fields a definition may name (as a key part or a counted value), with their dotted paths.
EVENT_FIELDS = (
    "kind", "ts", "id", "user", "app", "campaign", "creative", "price",
    "device.ua", "device.model", "device.os", "device.w", "device.h", "device.pxratio",
    "device.lmt", "geo.country", "geo.lat", "geo.lon", "geo.utcoffset", "slot.w", "slot.h",
    "coppa",
)  # fmt: skip


_ID_FIELDS = ("id", "user", "app", "campaign", "creative")


class Event(Struct):
    """One validated event; ``ts_s`` is the event time in seconds, ``ts_ms`` in milliseconds."""

    kind: EventKind
    ts_s: float | str = msgspec.field(name="ts")
    id: Identifier
    user: Identifier | None = None
    app: Identifier | None = None
    campaign: Identifier | None = None
    creative: Identifier | None = None
    price: Annotated[float, Meta(ge=0)] | None = None
    device: Device | None = None
    geo: Geo | None = None
    slot: Slot | None = None
    coppa: Flag | None = False
    # Not read from the line: set from ts_s (the name keeps producers' fields out of it).
    ts_ms: int = msgspec.field(default=0, name="~windvane.ts_ms")
    # True when the user asked not to be tracked (lmt) or is a child (COPPA); set once,
    # since every route of the event asks.
    restricted: bool = msgspec.field(default=False, name="~windvane.restricted")

    def __post_init__(self) -> None:
        ts = self.ts_s
        if not ((type(ts) is float or type(ts) is int) and EARLIEST_S <= ts < LATEST_S):
            try:
                ts = parse_time_s(ts)
            except ValueError as exc:
                raise BadEvent("ts", str(exc)) from None
        if type(ts) is not float:
            ts = float(ts)
        self.ts_s = ts
        self.ts_ms = round(ts * 1000)
        if type(self.coppa) is not bool:
            self.coppa = bool(self.coppa)
        device = self.device
        self.restricted = self.coppa or (device is not None and bool(device.lmt))
        if unsafe_id(f"{self.id}{self.user}{self.app}{self.campaign}{self.creative}"):
            check_ids(self, _ID_FIELDS, BadEvent)

    def field(self, path: str) -> object:
        """The value at a dotted path such as ``user`` or ``geo.country``."""
        head, _, tail = path.partition(".")
        value = getattr(self, "ts_s" if head == "ts" else head, None)
        if tail:
            return getattr(value, tail, None) if value is not None else None
        return value


_DECODER = msgspec.json.Decoder(Event)


def parse_event_line(line: bytes | str) -> Event:
    """Decode and validate one JSON Lines record, or raise ``BadEvent`` naming the field."""
    return decode_checked(_DECODER, line, BadEvent, "not valid JSON")


def parse_event(obj: object) -> Event:
    """Validate an already decoded JSON value (a dict) as an event."""
    try:
        return msgspec.convert(obj, Event)
    except msgspec.ValidationError as exc:
        raise BadEvent(*validation_problem(exc)) from None
