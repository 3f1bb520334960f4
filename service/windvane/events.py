"""Events from the bidder: request, bid, win, impression and click, one JSON object each.

An event is validated whole before anything of it is applied, so a bad line is
rejected cleanly (``BadEvent`` names the field) and never half-counted. Unknown extra
fields are ignored, so producers can add their own without breaking replay.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import orjson

from windvane.errors import BadEvent
from windvane.event_time import parse_time_s
from windvane.rtb_objects import (
    Device,
    Geo,
    Slot,
    flag,
    identifier,
    number,
    parse_device,
    parse_geo,
    parse_slot,
)

EVENT_KINDS = ("request", "bid", "win", "impression", "click")

# Fields a definition may name (as a key part or a counted value), with their dotted paths.
EVENT_FIELDS = (
    "kind", "ts", "id", "user", "app", "campaign", "creative", "price",
    "device.ua", "device.model", "device.os", "device.w", "device.h", "device.pxratio",
    "device.lmt", "geo.country", "geo.lat", "geo.lon", "geo.utcoffset", "slot.w", "slot.h",
    "coppa",
)  # fmt: skip


@dataclass(slots=True)
class Event:
    """One validated event; ``ts_ms`` is the event time in whole milliseconds."""

    kind: str
    ts_s: float
    id: str
    user: str | None = None
    app: str | None = None
    campaign: str | None = None
    creative: str | None = None
    price: float | None = None
    device: Device | None = None
    geo: Geo | None = None
    slot: Slot | None = None
    coppa: bool = False
    ts_ms: int = field(init=False)

    def __post_init__(self) -> None:
        self.ts_ms = round(self.ts_s * 1000)

    @property
    def restricted(self) -> bool:
        """True when the user asked not to be tracked (lmt) or is a child (COPPA)."""
        return self.coppa or (self.device is not None and self.device.lmt)

    def field(self, path: str) -> object:
        """The value at a dotted path such as ``user`` or ``geo.country``."""
        head, _, tail = path.partition(".")
        value = getattr(self, head, None)
        if tail and value is not None:
            value = getattr(value, tail, None)
        return value


def parse_event(obj: object) -> Event:
    """Validate a decoded JSON value as an event, or raise ``BadEvent``."""
    if not isinstance(obj, dict):
        raise BadEvent("", "an event must be a JSON object")
    kind = obj.get("kind")
    if kind is None:
        raise BadEvent("kind", "is missing")
    if kind not in EVENT_KINDS:
        raise BadEvent("kind", f"{kind!r} is not one of {', '.join(EVENT_KINDS)}")
    if "ts" not in obj or obj["ts"] is None:
        raise BadEvent("ts", "is missing")
    try:
        ts_s = parse_time_s(obj["ts"])
    except ValueError as exc:
        raise BadEvent("ts", str(exc)) from None
    auction = identifier(obj.get("id"), "id", BadEvent)
    if auction is None:
        raise BadEvent("id", "is missing (the auction id linking request, bid, win and click)")
    return Event(
        kind=kind,
        ts_s=ts_s,
        id=auction,
        user=identifier(obj.get("user"), "user", BadEvent),
        app=identifier(obj.get("app"), "app", BadEvent),
        campaign=identifier(obj.get("campaign"), "campaign", BadEvent),
        creative=identifier(obj.get("creative"), "creative", BadEvent),
        price=number(obj.get("price"), "price", BadEvent, low=0),
        device=parse_device(obj.get("device"), BadEvent),
        geo=parse_geo(obj.get("geo"), BadEvent),
        slot=parse_slot(obj.get("slot"), BadEvent),
        coppa=flag(obj.get("coppa"), "coppa", BadEvent),
    )


def parse_event_line(line: bytes | str) -> Event:
    """Decode one JSON Lines record and validate it."""
    try:
        obj = orjson.loads(line)
    except orjson.JSONDecodeError as exc:
        raise BadEvent("", f"not valid JSON ({exc})") from None
    return parse_event(obj)
