"""Event and request parsing: RFC 3339 and epoch times, OpenRTB-shaped objects, clear errors."""

from __future__ import annotations

from datetime import UTC, datetime

import pytest

from windvane.errors import BadEvent, BadRequest
from windvane.inputs.events import parse_event, parse_event_line
from windvane.inputs.lookup_request import parse_lookup_request

# 2026-12-01T09:30:00Z as epoch seconds, written out with datetime (the reference clock).
BASE = datetime(2026, 12, 1, 9, 30, tzinfo=UTC).timestamp()


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        ("2026-12-01T09:30:00Z", BASE),
        ("2026-12-01T10:30:00+01:00", BASE),
        ("2026-12-01t04:00:00.250-05:30", BASE + 0.25),
        ("2026-12-01 09:30:00.250000z", BASE + 0.25),
        ("2026-12-01T09:30:00.123456789Z", BASE + 0.123456),
    ],
)
def test_rfc3339_times_with_offset(text: str, expected: float) -> None:
    # reference: RFC 3339 section 5.6 (time-offset "Z" or +hh:mm; "T" may be lower case or
    # a space, per its note), against datetime arithmetic
    got = parse_event({"kind": "request", "ts": text, "id": "a"}).ts_s
    assert abs(got - expected) < 1e-6


@pytest.mark.parametrize(
    "text", ["2026-12-01T09:30:00", "2026-12-01", "20261201T093000Z", "yesterday"]
)
def test_times_without_offset_or_malformed_are_refused(text: str) -> None:
    with pytest.raises(BadEvent) as err:
        parse_event({"kind": "request", "ts": text, "id": "a"})
    assert err.value.field == "ts"


def test_epoch_seconds_and_milliseconds() -> None:
    event = parse_event({"kind": "win", "ts": 1796000000.1234, "id": "a", "price": 0})
    assert (event.ts_s, event.ts_ms) == (1796000000.1234, 1796000000123)
    with pytest.raises(BadEvent, match="looks like milliseconds") as err:
        parse_event({"kind": "win", "ts": 1796000000123, "id": "a"})
    assert err.value.field == "ts"


def test_unknown_fields_are_ignored_and_flags_read() -> None:
    event = parse_event_line(
        b'{"kind":"impression","ts":1796000000,"id":"a","user":"u","extra":{"x":1},'
        b'"device":{"lmt":1,"w":1080,"h":1920,"pxratio":2.5,"future":true},"geo":{"country":"deu"}}'
    )
    assert event.restricted
    assert event.device is not None
    assert event.device.pxratio == 2.5
    assert event.geo is not None
    assert event.geo.country == "DEU"
    assert event.field("geo.country") == "DEU"
    assert event.field("device.model") is None


@pytest.mark.parametrize(
    ("record", "field"),
    [
        ({"kind": "request", "ts": 1796000000, "id": "a", "coppa": 2}, "coppa"),
        ({"kind": "request", "ts": 1796000000, "id": "a", "geo": {"lat": 91}}, "geo.lat"),
        (
            {"kind": "request", "ts": 1796000000, "id": "a", "geo": {"utcoffset": 90.5}},
            "geo.utcoffset",
        ),
        ({"kind": "request", "ts": 1796000000, "id": "a", "geo": {"country": "DE"}}, "geo.country"),
        (
            {"kind": "request", "ts": 1796000000, "id": "a", "device": {"pxratio": 0}},
            "device.pxratio",
        ),
        ({"kind": "request", "ts": 1796000000, "id": "a", "slot": {"w": 320}}, "slot.h"),
        ({"kind": "request", "ts": True, "id": "a"}, "ts"),
        ({"kind": "request", "ts": 1796000000, "id": 7}, "id"),
        ({"kind": "request", "ts": 1796000000, "id": "a", "app": ""}, "app"),
        # Braces would break the cluster hash tag; spaces and control characters the key.
        ({"kind": "request", "ts": 1796000000, "id": "a", "user": "u{1}"}, "user"),
        ({"kind": "win", "ts": 1796000000, "id": "a", "campaign": "spring sale"}, "campaign"),
        ({"kind": "request", "ts": 1796000000, "id": "a\tb"}, "id"),
        ({"kind": "click", "ts": 1796000000, "id": "a", "creative": "c\x7f"}, "creative"),
        ({"kind": "request", "ts": 1796000000, "id": "a", "device": []}, "device"),
    ],
)
def test_bad_fields_are_named(record: dict, field: str) -> None:
    with pytest.raises(BadEvent) as err:
        parse_event(record)
    assert err.value.field == field
    assert str(err.value).startswith(f"{field}: ")


def test_lookup_request_defaults_and_errors() -> None:
    request = parse_lookup_request({"user": "u", "campaigns": ["a", "b", "a"]})
    assert request.campaigns == ("a", "b")
    assert abs(request.ts_s - datetime.now().timestamp()) < 5
    with pytest.raises(BadRequest) as err:
        parse_lookup_request({"campaigns": "a"})
    assert err.value.field == "campaigns"
    with pytest.raises(BadRequest) as err:
        parse_lookup_request({"campaigns": ["a", 3]})
    assert err.value.field == "campaigns[1]"
    with pytest.raises(BadRequest) as err:
        parse_lookup_request({"campaigns": ["a", "b}"]})
    assert err.value.field == "campaigns[1]"
    with pytest.raises(BadRequest) as err:
        parse_lookup_request({"user": "u 1"})
    assert err.value.field == "user"
