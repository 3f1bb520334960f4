"""OpenRTB 2.5 / 2.6 bid requests as windvane lookup requests, one per imp.

A bidder holds the BidRequest exactly as the exchange sent it; building lookup requests
by hand from it is where user ids, sizes and privacy flags get lost. The request-wide
parts (user, app, device, geo, COPPA) are read once and shared by every imp; only the
slot size differs per imp, so each imp becomes its own lookup.

Only the fields windvane uses are read, and only those are validated: a request is not
refused for a malformed field the lookup would ignore (``site``, ``regs.gdpr``, ``ext``
and the rest). Error fields are dotted OpenRTB paths such as ``imp[1].banner.w``.
"""

from __future__ import annotations

import time

from windvane.errors import BadRequest
from windvane.inputs.event_time import parse_time_s
from windvane.inputs.lookup_request import MAX_CAMPAIGNS, LookupRequest
from windvane.inputs.rtb_objects import (
    Slot,
    flag,
    identifier,
    json_object,
    json_type,
    parse_device,
    parse_geo,
    parse_slot,
)


def lookups_from_bid_request(
    bid_request: object,
    campaigns: tuple[str, ...] = (),
    ts_s: float | None = None,
) -> list[tuple[str, LookupRequest]]:
    """One ``(imp.id, LookupRequest)`` pair per imp of ``bid_request``, in imp order.

    ``campaigns`` are the bidder's candidates for every imp, and ``ts_s`` the auction
    time (now when omitted; OpenRTB carries no timestamp). Raises ``BadRequest`` naming
    the OpenRTB field when the request is malformed.
    """
    if not isinstance(bid_request, dict):
        raise BadRequest("", f"a bid request must be a JSON object, not {json_type(bid_request)}")
    _require_string(bid_request.get("id"), "id")
    imps = bid_request.get("imp")
    if imps is None:
        raise BadRequest("imp", "is required by OpenRTB")
    if not isinstance(imps, list):
        raise BadRequest("imp", f"must be an array of Imp objects, not {json_type(imps)}")
    if not imps:
        raise BadRequest("imp", "must hold at least one Imp object")

    when = time.time() if ts_s is None else _auction_time(ts_s)
    wanted = _campaigns(campaigns)

    raw_device = bid_request.get("device")
    device = parse_device(raw_device, BadRequest, prefix="device")
    raw_user = json_object(bid_request.get("user"), "user", BadRequest)
    user = None
    raw_geo = None
    if isinstance(raw_device, dict):
        user = _advertising_id(raw_device.get("ifa"))
        raw_geo = raw_device.get("geo")
    if raw_geo is not None:
        geo = parse_geo(raw_geo, BadRequest, prefix="device.geo")
    elif raw_user is not None:
        geo = parse_geo(raw_user.get("geo"), BadRequest, prefix="user.geo")
    else:
        geo = None
    if user is None and raw_user is not None:
        user = identifier(raw_user.get("id"), "user.id", BadRequest)

    raw_app = json_object(bid_request.get("app"), "app", BadRequest)
    app = None if raw_app is None else identifier(raw_app.get("bundle"), "app.bundle", BadRequest)
    raw_regs = json_object(bid_request.get("regs"), "regs", BadRequest)
    coppa = raw_regs is not None and flag(raw_regs.get("coppa"), "regs.coppa", BadRequest)

    lookups: list[tuple[str, LookupRequest]] = []
    seen: dict[str, int] = {}
    for i, imp in enumerate(imps):
        if not isinstance(imp, dict):
            raise BadRequest(f"imp[{i}]", f"must be an Imp object, not {json_type(imp)}")
        imp_id = _require_string(imp.get("id"), f"imp[{i}].id")
        if imp_id in seen:
            raise BadRequest(f"imp[{i}].id", f"repeats imp[{seen[imp_id]}].id {imp_id!r}")
        seen[imp_id] = i
        request = LookupRequest(
            user=user,
            app=app,
            ts_s=when,
            device=device,
            geo=geo,
            slot=_slot(imp, i),
            campaigns=wanted,
            coppa=coppa,
        )
        lookups.append((imp_id, request))
    return lookups


def _advertising_id(raw: object) -> str | None:
    """``device.ifa``, or None when absent or all zeros.

    iOS and Android hand out an all-zero id when the user limited ad tracking; taken
    as a user id, every such user would share one state.
    """
    ifa = identifier(raw, "device.ifa", BadRequest)
    if ifa is None or not ifa.strip("0-"):
        return None
    return ifa


def _slot(imp: dict, i: int) -> Slot | None:
    """The imp's size in device-independent pixels: banner w/h, first format, video w/h.

    A source that gives neither w nor h (a banner sized only by ``format``, a Flex Ads
    format given as ``wratio``/``hratio``) is passed over; one that gives only one of
    them is refused, since a half size cannot be used and signals a broken request.
    """
    banner = json_object(imp.get("banner"), f"imp[{i}].banner", BadRequest)
    if banner is not None:
        if _sized(banner):
            return parse_slot(banner, BadRequest, prefix=f"imp[{i}].banner")
        formats = banner.get("format")
        if formats is not None:
            if not isinstance(formats, list):
                raise BadRequest(
                    f"imp[{i}].banner.format",
                    f"must be an array of Format objects, not {json_type(formats)}",
                )
            if formats:
                first = json_object(formats[0], f"imp[{i}].banner.format[0]", BadRequest)
                if first is not None and _sized(first):
                    return parse_slot(first, BadRequest, prefix=f"imp[{i}].banner.format[0]")
    video = json_object(imp.get("video"), f"imp[{i}].video", BadRequest)
    if video is not None and _sized(video):
        return parse_slot(video, BadRequest, prefix=f"imp[{i}].video")
    return None


def _sized(obj: dict) -> bool:
    return obj.get("w") is not None or obj.get("h") is not None


def _require_string(raw: object, field: str) -> str:
    """A required OpenRTB string (``id``, ``imp[].id``): present, a string, not empty."""
    if raw is None:
        raise BadRequest(field, "is required by OpenRTB")
    if not isinstance(raw, str):
        raise BadRequest(field, f"must be a string, not {json_type(raw)}")
    if not raw:
        raise BadRequest(field, "must not be empty")
    return raw


def _auction_time(ts_s: object) -> float:
    try:
        return parse_time_s(ts_s)
    except ValueError as exc:
        raise BadRequest("ts", str(exc)) from None


def _campaigns(campaigns: object) -> tuple[str, ...]:
    """The candidates, checked as in a lookup request, duplicates dropped in order."""
    if not isinstance(campaigns, tuple | list):
        raise BadRequest("campaigns", "must be a tuple of campaign ids")
    if len(campaigns) > MAX_CAMPAIGNS:
        raise BadRequest("campaigns", f"has more than {MAX_CAMPAIGNS} candidates")
    for i, campaign in enumerate(campaigns):
        if identifier(campaign, f"campaigns[{i}]", BadRequest) is None:
            raise BadRequest(f"campaigns[{i}]", "must not be None")
    return tuple(dict.fromkeys(campaigns))
