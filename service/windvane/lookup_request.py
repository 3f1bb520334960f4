"""The lookup request: who asks (user, app), when, on what device and slot, for which campaigns.

The same request object is read by the CLI, the HTTP service and the tests, so it is
parsed in one place. Time defaults to now, because a bidder asks about the auction
it is running.
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field

from windvane.errors import BadRequest
from windvane.event_time import parse_time_s
from windvane.rtb_objects import (
    Device,
    Geo,
    Slot,
    flag,
    identifier,
    parse_device,
    parse_geo,
    parse_slot,
)

MAX_CAMPAIGNS = 500


@dataclass(slots=True)
class LookupRequest:
    user: str | None = None
    app: str | None = None
    ts_s: float = field(default_factory=time.time)
    device: Device | None = None
    geo: Geo | None = None
    slot: Slot | None = None
    campaigns: tuple[str, ...] = ()
    coppa: bool = False

    @property
    def restricted(self) -> bool:
        """Limit-ad-tracking or COPPA: no per-user state may be read for this request."""
        return self.coppa or (self.device is not None and self.device.lmt)


def parse_lookup_request(obj: object) -> LookupRequest:
    """Validate a decoded JSON value as a lookup request, or raise ``BadRequest``."""
    if not isinstance(obj, dict):
        raise BadRequest("", "a lookup request must be a JSON object")
    raw_ts = obj.get("ts")
    ts_s = None
    if raw_ts is not None:
        try:
            ts_s = parse_time_s(raw_ts)
        except ValueError as exc:
            raise BadRequest("ts", str(exc)) from None
    raw_campaigns = obj.get("campaigns")
    campaigns: tuple[str, ...] = ()
    if raw_campaigns is not None:
        if not isinstance(raw_campaigns, list):
            raise BadRequest("campaigns", "must be an array of campaign ids")
        if len(raw_campaigns) > MAX_CAMPAIGNS:
            raise BadRequest("campaigns", f"has more than {MAX_CAMPAIGNS} candidates")
        campaigns = tuple(
            identifier(c, f"campaigns[{i}]", BadRequest) or "" for i, c in enumerate(raw_campaigns)
        )
        if "" in campaigns:
            raise BadRequest(f"campaigns[{campaigns.index('')}]", "must not be null")
    return LookupRequest(
        user=identifier(obj.get("user"), "user", BadRequest),
        app=identifier(obj.get("app"), "app", BadRequest),
        ts_s=time.time() if ts_s is None else ts_s,
        device=parse_device(obj.get("device"), BadRequest),
        geo=parse_geo(obj.get("geo"), BadRequest),
        slot=parse_slot(obj.get("slot"), BadRequest),
        campaigns=tuple(dict.fromkeys(campaigns)),
        coppa=flag(obj.get("coppa"), "coppa", BadRequest),
    )
