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
from windvane.inputs.deadline import DEADLINE_HEADER, DEFAULT_DEADLINE_MS, MAX_DEADLINE_MS
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
    """A lookup: who, when, on what device and slot, for which candidate campaigns."""

    user: Annotated[Identifier | None, Meta(description="hashed device or user id")] = None
    app: Annotated[Identifier | None, Meta(description="app bundle id")] = None
    ts_s: Annotated[
        float | str | None, Meta(description="epoch seconds or RFC 3339 with offset; default now")
    ] = msgspec.field(default=None, name="ts")
    device: Device | None = None
    geo: Geo | None = None
    slot: Slot | None = None
    campaigns: Annotated[
        tuple[Identifier, ...],
        Meta(max_length=MAX_CAMPAIGNS, description="candidate campaigns, each valued apart"),
    ] = ()
    coppa: Annotated[Flag | None, Meta(description="1: COPPA applies, no per-user state")] = False

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


class LookupBody(LookupRequest):
    """A lookup as the HTTP API takes it: the request plus the model and the deadline."""

    model: Annotated[
        Annotated[str, Meta(min_length=1)] | None,
        Meta(description="model to score with; default: the service's"),
    ] = None
    deadline_ms: Annotated[
        Annotated[float, Meta(gt=0, le=MAX_DEADLINE_MS)] | None,
        Meta(
            description=f"answer within this many ms (default {DEFAULT_DEADLINE_MS:g}); "
            f"or the {DEADLINE_HEADER} header"
        ),
    ] = None


_DECODER = msgspec.json.Decoder(LookupBody)


def parse_lookup_request(obj: Any) -> LookupRequest:
    """Validate a decoded JSON value (a dict) as a lookup request, or raise ``BadRequest``."""
    try:
        return msgspec.convert(obj, LookupRequest)
    except msgspec.ValidationError as exc:
        raise BadRequest(*validation_problem(exc)) from None


def decode_lookup_body(body: bytes) -> LookupBody:
    """Decode and validate a lookup body in one pass, or raise ``BadRequest``."""
    return decode_checked(_DECODER, body, BadRequest, "the body is not valid JSON")
