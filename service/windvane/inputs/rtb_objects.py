"""Device, Geo and Slot: the OpenRTB-shaped objects that events and lookup requests share.

Field names and meanings follow the OpenRTB 2.5 objects of the same names: ``device.w``
and ``device.h`` are physical pixels, ``device.pxratio`` is physical pixels per
device-independent pixel, ``slot.w``/``slot.h`` (the Banner object's w/h) are
device-independent pixels, ``geo.utcoffset`` is minutes east of UTC.

The rules live in the type declarations below, checked by msgspec while it decodes
(in C, which keeps validation off the top of a replay's or a lookup's profile). The
few functions at the end check single values with the same types, for callers that
walk a document by hand (the OpenRTB mapping), and ``validation_problem`` turns a
msgspec error into the field path and a reason in plain words.
"""

from __future__ import annotations

import re
from typing import Annotated, Any, Literal

import msgspec
from msgspec import Meta, Struct

from windvane.errors import InputError
from windvane.inputs.json_body import DEPTH_REASON

ErrorType = type[InputError]

MAX_ID_LENGTH = 256
ID_REASON = "must not contain spaces, control characters or braces"
COUNTRY_REASON = "must be an ISO 3166-1 alpha-3 code such as DEU"

# An id (user, app, campaign, creative): no spaces, control characters or braces, since
# braces would break the Redis hash tag that keeps one user's state in one cluster slot.
# The length is checked while decoding; the characters by ``unsafe_id`` in the owner's
# __post_init__, because a msgspec ``pattern`` runs a regular expression per value and
# cost a replay a fifth of its time.
Identifier = Annotated[str, Meta(min_length=1, max_length=MAX_ID_LENGTH)]
Positive = Annotated[float, Meta(gt=0)]
Flag = Literal[0, 1] | bool


class Device(Struct, omit_defaults=True):
    """OpenRTB 2.5 Device fields windvane reads."""

    ua: Annotated[str | None, Meta(description="user agent")] = None
    model: Annotated[
        str | None, Meta(description="device model, looked up in the device table")
    ] = None
    os: str | None = None
    w: Annotated[Positive | None, Meta(description="screen width, physical pixels")] = None
    h: Annotated[Positive | None, Meta(description="screen height, physical pixels")] = None
    pxratio: Annotated[
        Positive | None, Meta(description="physical pixels per device-independent pixel")
    ] = None
    lmt: Annotated[
        Flag | None, Meta(description="1: limit ad tracking, no per-user state is read")
    ] = False

    def __post_init__(self) -> None:
        if type(self.lmt) is not bool:
            self.lmt = bool(self.lmt)


class Geo(Struct, omit_defaults=True):
    """OpenRTB 2.5 Geo fields windvane reads, for the user's local time."""

    country: Annotated[str | None, Meta(description="ISO 3166-1 alpha-3, e.g. DEU")] = None
    lat: Annotated[float, Meta(ge=-90, le=90)] | None = None
    lon: Annotated[float, Meta(ge=-180, le=180)] | None = None
    utcoffset: Annotated[
        Annotated[int, Meta(ge=-720, le=840)] | None, Meta(description="minutes east of UTC")
    ] = None

    def __post_init__(self) -> None:
        country = self.country
        if country is not None:
            if not (len(country) == 3 and country.isascii() and country.isalpha()):
                raise ValueError(COUNTRY_REASON)  # msgspec reports it at this object's path
            if not country.isupper():
                self.country = country.upper()


def unsafe_id(value: str) -> bool:
    """True when an id holds a space, a control character or a brace (see ``Identifier``)."""
    return not value.isprintable() or " " in value or "{" in value or "}" in value


def check_ids(owner: object, names: tuple[str, ...], error: ErrorType) -> None:
    """Raise ``error(name, reason)`` for the first of ``owner``'s id fields that is unsafe.

    Callers on a hot path first test all ids at once (``unsafe_id`` of their
    concatenation, None included as the word, which is safe) and call this only then.
    """
    for name in names:
        value = getattr(owner, name)
        if value is not None and unsafe_id(value):
            raise error(name, ID_REASON)


class Slot(Struct):
    """The ad slot (OpenRTB 2.5 Banner w/h)."""

    w: Annotated[Positive, Meta(description="creative width, device-independent pixels")]
    h: Annotated[Positive, Meta(description="creative height, device-independent pixels")]


def decode_checked(
    decoder: msgspec.json.Decoder, data: bytes | str, error: ErrorType, not_json: str
) -> Any:
    """Decode and validate in one pass; ``error(field, reason)`` for a bad field or bad JSON.

    A typed decoder keeps nothing deeper than its type, so depth is not checked on the
    way (that would cost every lookup a pass); only JSON nested too deep for msgspec to
    skip raises ``RecursionError``, and it is refused as too deep (see ``json_body``).
    """
    try:
        return decoder.decode(data)
    except msgspec.ValidationError as exc:
        raise error(*validation_problem(exc)) from None
    except msgspec.DecodeError as exc:
        raise error("", f"{not_json} ({exc})") from None
    except RecursionError:
        raise error("", f"the JSON {DEPTH_REASON}") from None


def validation_problem(exc: msgspec.ValidationError, prefix: str = "") -> tuple[str, str]:
    """(dotted field path, reason in plain words) from a msgspec error."""
    message = str(exc)
    body, _, where = message.rpartition(" - at `")
    if not _:
        body, where = message, "$`"
    path = where.rstrip("`").removeprefix("$").lstrip(".")
    missing = re.match(r"Object missing required field `(.+)`", body)
    if body == COUNTRY_REASON:
        path, reason = f"{path}.country" if path else "country", body
    elif missing:
        path = f"{path}.{missing.group(1)}" if path else missing.group(1)
        reason = "is missing"
    else:
        reason = _reason(body)
    if prefix:
        path = f"{prefix}.{path}" if path and not path.startswith("[") else f"{prefix}{path}"
    return path, reason


_TYPE_WORDS = {
    "float": "a number", "int": "a whole number", "str": "a string", "bool": "a boolean",
    "object": "an object", "array": "an array", "null": "null",
}  # fmt: skip


def _words(spec: str) -> str:
    parts = [p.strip().strip("`") for p in spec.split("|")]
    named = [_TYPE_WORDS.get(p, p) for p in parts if p != "null"]
    return " or ".join(dict.fromkeys(named)) or "null"


def _reason(body: str) -> str:
    if body.startswith("Invalid enum value"):
        return body.replace("Invalid enum value", "is not allowed:", 1)
    match = re.match(r"Expected `([^`]+)`, got `([^`]+)`", body)
    if match:
        return f"must be {_words(match.group(1))}, not {_words(match.group(2))}"
    match = re.match(r"Expected `(?:str|array)` of length >= 1", body)
    if match:
        return "must not be empty"
    match = re.match(r"Expected `(?:str|array)` of length <= (\d+)", body)
    if match:
        return f"is longer than {match.group(1)}"
    match = re.match(r"Expected `(?:float|int)` (>=|>|<=|<) (\S+)", body)
    if match:
        words = {">=": "at least", ">": "greater than", "<=": "at most", "<": "less than"}
        bound = float(match.group(2))
        return f"must be {words[match.group(1)]} {bound:g}"
    return body


def _convert(raw: object, kind: Any, field: str, error: ErrorType) -> Any:
    try:
        return msgspec.convert(raw, kind)
    except msgspec.ValidationError as exc:
        path, reason = validation_problem(exc, field)
        raise error(path, reason) from None


def identifier(raw: object, field: str, error: ErrorType) -> str | None:
    """An id, or None when absent; ``error(field, reason)`` when malformed."""
    if raw is None:
        return None
    value = _convert(raw, Identifier, field, error)
    if unsafe_id(value):
        raise error(field, ID_REASON)
    return value


def flag(raw: object, field: str, error: ErrorType) -> bool:
    """An OpenRTB 0/1 flag; booleans are accepted as well."""
    return False if raw is None else bool(_convert(raw, Flag, field, error))


def json_object(raw: object, field: str, error: ErrorType) -> dict | None:
    if raw is None:
        return None
    if not isinstance(raw, dict):
        raise error(field, f"must be an object, not {json_type(raw)}")
    return raw


def parse_device(raw: object, error: ErrorType, prefix: str = "device") -> Device | None:
    return None if raw is None else _convert(raw, Device, prefix, error)


def parse_geo(raw: object, error: ErrorType, prefix: str = "geo") -> Geo | None:
    return None if raw is None else _convert(raw, Geo, prefix, error)


def parse_slot(raw: object, error: ErrorType, prefix: str = "slot") -> Slot | None:
    return None if raw is None else _convert(raw, Slot, prefix, error)


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
