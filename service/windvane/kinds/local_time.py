"""The user's local clock: hour of day and day of week where the device is.

Bid response rates follow the user's day (commute, evening, weekend), not the bidder's,
so the "local clock" feature needs the time zone of the device. A bid request gives us
up to three hints, tried from most to least direct:

1. ``geo.utcoffset`` (OpenRTB 2.5, minutes east of UTC): the exchange already did the work,
   and a fixed offset is exact for this one request even across a DST change.
2. ``geo.lat``/``geo.lon``: the IANA zone whose land polygon holds the point, found with
   ``timezonefinder``. Points at sea (including the common 0,0 placeholder) match no land
   zone and fall through, because an ``Etc/GMT±N`` sea zone says nothing about the user.
3. ``geo.country`` (ISO 3166-1 alpha-3): the country's zone from tzdata's ``zone.tab``.
   For a country with several zones we take the first one ``zone.tab`` lists for it
   (USA → America/New_York), except for the few countries where that line is a small
   territory far from most users (BRA → America/Noronha, CAN → America/St_Johns, AUS →
   Australia/Lord_Howe, RUS → Europe/Kaliningrad, UKR → Europe/Simferopol): those take
   the zone of their largest city from ``LARGEST_CITY_ZONE``.
4. UTC, so the feature always has a value.

Every bid request passes through here, so nothing is loaded or parsed per call: one
``TimezoneFinder`` made on first use, an exact-key cache of point → zone name, the
country table built once and ``ZoneInfo`` objects kept. ``timezonefinder`` (and with it
numpy) and pycountry are imported on first use too, so commands that never ask for a local
clock do not pay 0.2 s to import them. Call :func:`warm_up` at start so the first request
does not pay for loading. Inputs are expected to be validated already
(``windvane.inputs.rtb_objects`` and ``windvane.inputs.event_time``); values that would
not fit a hint (an offset of a day or more, a point off the globe, an unknown country)
make that hint count as absent instead of raising.
"""

from __future__ import annotations

import math
import threading
from datetime import UTC, datetime, timedelta, timezone, tzinfo
from functools import cache, lru_cache
from importlib import resources
from typing import TYPE_CHECKING
from zoneinfo import ZoneInfo

if TYPE_CHECKING:
    from timezonefinder import TimezoneFinder

__all__ = ["local_hour_dow", "resolve_zone", "warm_up"]

_SECONDS_PER_DAY = 86_400
# 1970-01-01, day 0 of the epoch, was a Thursday: weekday 3 with Monday as 0.
_EPOCH_WEEKDAY = 3
# A fixed tzinfo must lie strictly within one day of UTC; real offsets are -12:00..+14:00.
_MAX_OFFSET_MIN = 1440

_finder: TimezoneFinder | None = None
# TimezoneFinder instances must not be used from two threads at once (its own docs), and
# FastAPI runs plain endpoints in a thread pool; only cache misses take this lock.
_finder_lock = threading.Lock()
_zones: dict[str, ZoneInfo] = {}
_last: tuple[tuple[object, ...], tuple[int, int]] = ((), (0, 0))


def local_hour_dow(
    ts_s: float,
    utcoffset_min: int | None,
    lat: float | None,
    lon: float | None,
    country: str | None,
) -> tuple[int, int]:
    """Local hour (0-23) and day of week (0=Monday..6=Sunday) at epoch second ``ts_s``.

    The instant is floored to the whole second, so an hour starts exactly on its first
    second (``datetime.fromtimestamp`` would round a time a fraction of a microsecond
    before the hour up into the next one). Fixed offsets are plain arithmetic, since
    building a datetime costs more than the rest of the lookup.
    """
    global _last
    asked = (ts_s, utcoffset_min, lat, lon, country)
    last = _last
    if last[0] == asked:  # hour and day of week of one lookup ask the same question
        return last[1]
    if utcoffset_min is not None and -_MAX_OFFSET_MIN < utcoffset_min < _MAX_OFFSET_MIN:
        answer = _fixed_hour_dow(math.floor(ts_s) + utcoffset_min * 60)
    else:
        zone, _ = _named_zone(lat, lon, country)
        if zone is None:
            answer = _fixed_hour_dow(math.floor(ts_s))
        else:
            local = datetime.fromtimestamp(math.floor(ts_s), zone)
            answer = local.hour, local.weekday()
    _last = (asked, answer)
    return answer


def resolve_zone(
    utcoffset_min: int | None,
    lat: float | None,
    lon: float | None,
    country: str | None,
) -> tuple[tzinfo, str]:
    """The zone :func:`local_hour_dow` uses and which hint gave it.

    The second item is ``"utcoffset"``, ``"latlon"``, ``"country"`` or ``"utc"``, so that
    the service can count how often each fallback is taken.
    """
    if utcoffset_min is not None and -_MAX_OFFSET_MIN < utcoffset_min < _MAX_OFFSET_MIN:
        return _fixed_zone(utcoffset_min), "utcoffset"
    zone, path = _named_zone(lat, lon, country)
    if zone is None:
        return UTC, "utc"
    return zone, path


def warm_up() -> None:
    """Load the polygon data and the country table now rather than on the first request."""
    _zone_name_at(0.0, 0.0)
    _country_zones()


def _fixed_hour_dow(local_s: int) -> tuple[int, int]:
    days, seconds = divmod(local_s, _SECONDS_PER_DAY)
    return seconds // 3600, (days + _EPOCH_WEEKDAY) % 7


def _named_zone(
    lat: float | None, lon: float | None, country: str | None
) -> tuple[ZoneInfo | None, str]:
    """The IANA zone from the point, else from the country, else ``None`` (use UTC)."""
    if lat is not None and lon is not None and -90.0 <= lat <= 90.0 and -180.0 <= lon <= 180.0:
        name = _zone_name_at(lat, lon)
        if name is not None:
            return _zone(name), "latlon"
    if isinstance(country, str):
        name = _country_zones().get(country)
        if name is not None:
            return _zone(name), "country"
    return None, "utc"


@lru_cache(maxsize=65_536)
def _zone_name_at(lat: float, lon: float) -> str | None:
    """IANA name of the land zone holding the point, or ``None`` at sea.

    Keyed on the exact floats: devices repeat their reported position from request to
    request, and rounding the key would move points near a border into the wrong zone.
    """
    global _finder
    with _finder_lock:
        if _finder is None:
            from timezonefinder import TimezoneFinder

            _finder = TimezoneFinder(in_memory=True)
        try:
            return _finder.timezone_at_land(lng=lon, lat=lat)
        except (TypeError, ValueError):
            return None


def _zone(name: str) -> ZoneInfo:
    zone = _zones.get(name)
    if zone is None:
        zone = _zones[name] = ZoneInfo(name)
    return zone


@lru_cache(maxsize=4096)
def _fixed_zone(utcoffset_min: int) -> timezone:
    return timezone(timedelta(minutes=utcoffset_min))


# Where zone.tab's first line for a country is a poor guess of where its users are, the
# zone of the country's largest city (from memory; each name is checked against tzdata).
LARGEST_CITY_ZONE = {
    "AUS": "Australia/Sydney",
    "BRA": "America/Sao_Paulo",
    "CAN": "America/Toronto",
    "RUS": "Europe/Moscow",
    "UKR": "Europe/Kyiv",
}


@cache
def _country_zones() -> dict[str, str]:
    """ISO 3166-1 alpha-3 code → name of the first zone ``zone.tab`` lists for the country.

    Upper- and lower-case codes are both keys so that a lookup is one dict access.
    Countries without a line in ``zone.tab`` (Bouvet Island, Heard and McDonald Islands)
    are left out and so resolve to UTC.
    """
    import pycountry

    first_by_alpha2: dict[str, str] = {}
    table = resources.files("tzdata.zoneinfo").joinpath("zone.tab")
    for line in table.read_text(encoding="utf-8").splitlines():
        if not line or line.startswith("#"):
            continue
        code, _coordinates, name = line.split("\t")[:3]
        first_by_alpha2.setdefault(code, name)
    by_alpha3: dict[str, str] = {}
    for country in pycountry.countries:
        name = LARGEST_CITY_ZONE.get(country.alpha_3) or first_by_alpha2.get(country.alpha_2)
        if name is not None:
            by_alpha3[country.alpha_3] = name
            by_alpha3[country.alpha_3.lower()] = name
    return by_alpha3
