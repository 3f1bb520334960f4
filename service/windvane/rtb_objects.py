"""Device, Geo and Slot: the OpenRTB-shaped objects that events and lookup requests share.

Field names and meanings follow the OpenRTB 2.5 objects of the same names: ``device.w``
and ``device.h`` are physical pixels, ``device.pxratio`` is physical pixels per
device-independent pixel, ``slot.w``/``slot.h`` (the Banner object's w/h) are
device-independent pixels, ``geo.utcoffset`` is minutes east of UTC. Parsing is plain
Python rather than pydantic because it runs once per event and per lookup.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

from windvane.errors import InputError

ErrorType = type[InputError]

_CONTROL_OR_BRACE = re.compile(r"[\x00-\x20\x7f{}]")
MAX_ID_LENGTH = 256


@dataclass(slots=True)
class Device:
    ua: str | None = None
    model: str | None = None
    os: str | None = None
    w: float | None = None
    h: float | None = None
    pxratio: float | None = None
    lmt: bool = False


@dataclass(slots=True)
class Geo:
    country: str | None = None
    lat: float | None = None
    lon: float | None = None
    utcoffset: int | None = None


@dataclass(slots=True)
class Slot:
    w: float
    h: float


def identifier(raw: object, field: str, error: ErrorType) -> str | None:
    """An id (user, app, campaign, creative): a non-empty string without spaces or braces.

    Braces are refused because they would break the Redis hash tag that keeps one
    user's state in one cluster slot.
    """
    if raw is None:
        return None
    if not isinstance(raw, str):
        raise error(field, "must be a string")
    if not raw:
        raise error(field, "must not be empty")
    if len(raw) > MAX_ID_LENGTH:
        raise error(field, f"is longer than {MAX_ID_LENGTH} characters")
    if _CONTROL_OR_BRACE.search(raw):
        raise error(field, "must not contain spaces, control characters or braces")
    return raw


def number(
    raw: object,
    field: str,
    error: ErrorType,
    low: float | None = None,
    high: float | None = None,
    positive: bool = False,
) -> float | None:
    if raw is None:
        return None
    if isinstance(raw, bool) or not isinstance(raw, int | float):
        raise error(field, f"must be a number, not {json_type(raw)}")
    value = float(raw)
    if not math.isfinite(value):
        raise error(field, "must be a finite number")
    if positive and value <= 0:
        raise error(field, "must be greater than zero")
    if low is not None and value < low:
        raise error(field, f"must be at least {low:g}")
    if high is not None and value > high:
        raise error(field, f"must be at most {high:g}")
    return value


def flag(raw: object, field: str, error: ErrorType) -> bool:
    """An OpenRTB 0/1 flag; booleans are accepted as well."""
    if raw is None:
        return False
    if raw is True or raw is False:
        return raw
    if raw == 1 and isinstance(raw, int):
        return True
    if raw == 0 and isinstance(raw, int):
        return False
    raise error(field, "must be 0 or 1")


def text(raw: object, field: str, error: ErrorType) -> str | None:
    if raw is None:
        return None
    if not isinstance(raw, str):
        raise error(field, "must be a string")
    return raw


def json_object(raw: object, field: str, error: ErrorType) -> dict | None:
    if raw is None:
        return None
    if not isinstance(raw, dict):
        raise error(field, f"must be an object, not {json_type(raw)}")
    return raw


def parse_device(raw: object, error: ErrorType, prefix: str = "device") -> Device | None:
    obj = json_object(raw, prefix, error)
    if obj is None:
        return None
    return Device(
        ua=text(obj.get("ua"), f"{prefix}.ua", error),
        model=text(obj.get("model"), f"{prefix}.model", error),
        os=text(obj.get("os"), f"{prefix}.os", error),
        w=number(obj.get("w"), f"{prefix}.w", error, positive=True),
        h=number(obj.get("h"), f"{prefix}.h", error, positive=True),
        pxratio=number(obj.get("pxratio"), f"{prefix}.pxratio", error, positive=True),
        lmt=flag(obj.get("lmt"), f"{prefix}.lmt", error),
    )


def parse_geo(raw: object, error: ErrorType, prefix: str = "geo") -> Geo | None:
    obj = json_object(raw, prefix, error)
    if obj is None:
        return None
    country = obj.get("country")
    if country is not None:
        if not isinstance(country, str) or len(country) != 3 or not country.isalpha():
            raise error(f"{prefix}.country", "must be an ISO 3166-1 alpha-3 code such as DEU")
        country = country.upper()
    offset = number(obj.get("utcoffset"), f"{prefix}.utcoffset", error, low=-720, high=840)
    if offset is not None and offset != int(offset):
        raise error(f"{prefix}.utcoffset", "must be a whole number of minutes")
    return Geo(
        country=country,
        lat=number(obj.get("lat"), f"{prefix}.lat", error, low=-90, high=90),
        lon=number(obj.get("lon"), f"{prefix}.lon", error, low=-180, high=180),
        utcoffset=None if offset is None else int(offset),
    )


def parse_slot(raw: object, error: ErrorType, prefix: str = "slot") -> Slot | None:
    obj = json_object(raw, prefix, error)
    if obj is None:
        return None
    w = number(obj.get("w"), f"{prefix}.w", error, positive=True)
    h = number(obj.get("h"), f"{prefix}.h", error, positive=True)
    if w is None or h is None:
        raise error(prefix, "needs both w and h")
    return Slot(w, h)


def json_type(raw: object) -> str:
    if isinstance(raw, str):
        return "a string"
    if isinstance(raw, list):
        return "an array"
    if isinstance(raw, dict):
        return "an object"
    if isinstance(raw, bool):
        return "a boolean"
    return type(raw).__name__
