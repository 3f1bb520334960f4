"""The lookup request: who asks (user, app), when, on what device and slot, for which campaigns.

The same request type is read by the CLI, the HTTP service and the tests, and checked
by msgspec with the same types as events. Time defaults to now, because a bidder asks
about the auction it is running.
"""

from __future__ import annotations

import time
from typing import Annotated, Any

import msgspec
from msgspec import Meta, Struct

from windvane.errors import BadRequest
from windvane.inputs.event_time import parse_time_s
from windvane.inputs.rtb_objects import (
    ID_REASON,
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

MAX_CAMPAIGNS = 500


class LookupRequest(Struct):
    user: Identifier | None = None
    app: Identifier | None = None
    ts_s: float | str | None = msgspec.field(default=None, name="ts")
    device: Device | None = None
    geo: Geo | None = None
    slot: Slot | None = None
    campaigns: Annotated[tuple[Identifier, ...], Meta(max_length=MAX_CAMPAIGNS)] = ()
    coppa: Flag | None = False

    def __post_init__(self) -> None:
        if self.ts_s is None:
            self.ts_s = time.time()
        else:
            try:
                self.ts_s = parse_time_s(self.ts_s)
            except ValueError as exc:
                raise BadRequest("ts", str(exc)) from None
        if type(self.coppa) is not bool:
            self.coppa = bool(self.coppa)
        if unsafe_id(f"{self.user}{self.app}{''.join(self.campaigns)}"):
            check_ids(self, ("user", "app"), BadRequest)
            for i, campaign in enumerate(self.campaigns):
                if unsafe_id(campaign):
                    raise BadRequest(f"campaigns[{i}]", ID_REASON)
        if len(set(self.campaigns)) != len(self.campaigns):
            self.campaigns = tuple(dict.fromkeys(self.campaigns))

    @property
    def restricted(self) -> bool:
        """Limit-ad-tracking or COPPA: no per-user state may be read for this request."""
        return bool(self.coppa) or (self.device is not None and bool(self.device.lmt))


class LookupCall(LookupRequest):
    """A lookup as the HTTP API takes it: the request plus the model and the deadline."""

    model: Annotated[str, Meta(min_length=1)] | None = None
    deadline_ms: Annotated[float, Meta(gt=0, le=10_000)] | None = None


_DECODER = msgspec.json.Decoder(LookupCall)


def parse_lookup_request(obj: Any) -> LookupRequest:
    """Validate a decoded JSON value (a dict) as a lookup request, or raise ``BadRequest``."""
    try:
        return msgspec.convert(obj, LookupRequest)
    except msgspec.ValidationError as exc:
        raise BadRequest(*validation_problem(exc)) from None


def decode_lookup_call(body: bytes) -> LookupCall:
    """Decode and validate a lookup body in one pass, or raise ``BadRequest``."""
    return decode_checked(_DECODER, body, BadRequest, "the body is not valid JSON")
