"""The local clock against the IANA time zone database.

References: hours and weekdays come from ``zoneinfo`` (tzdata's compiled IANA database)
or, for fixed offsets, from ``datetime`` with a ``timezone`` of that offset; country zones
and the coordinates of each zone's principal city come from tzdata's ``zone.tab``; alpha-3
to alpha-2 codes from ISO 3166-1 through pycountry. City coordinates and the dates of DST
changes written below are marked "(from memory)"; each DST instant is also checked to be
a real offset change in zoneinfo, so a wrong memory fails the test instead of passing it.
"""

from __future__ import annotations

import math
import re
from concurrent.futures import ThreadPoolExecutor
from datetime import UTC, datetime, timedelta, timezone
from importlib import resources
from zoneinfo import ZoneInfo

import pycountry
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from timezonefinder import TimezoneFinder

from windvane.kinds import local_time
from windvane.kinds.local_time import LARGEST_CITY_ZONE, local_hour_dow, resolve_zone, warm_up

START_2000 = int(datetime(2000, 1, 1, tzinfo=UTC).timestamp())
END_2035 = int(datetime(2036, 1, 1, tzinfo=UTC).timestamp()) - 1

# (lat, lon, IANA zone) of cities well inside their zone (from memory).
CITIES = [
    (40.7128, -74.0060, "America/New_York"),
    (34.0522, -118.2437, "America/Los_Angeles"),
    (33.4484, -112.0740, "America/Phoenix"),
    (21.3069, -157.8583, "Pacific/Honolulu"),
    (-23.5505, -46.6333, "America/Sao_Paulo"),
    (51.5074, -0.1278, "Europe/London"),
    (52.5200, 13.4050, "Europe/Berlin"),
    (35.6892, 51.3890, "Asia/Tehran"),
    (19.0760, 72.8777, "Asia/Kolkata"),
    (27.7172, 85.3240, "Asia/Kathmandu"),
    (35.6762, 139.6503, "Asia/Tokyo"),
    (-34.9285, 138.6007, "Australia/Adelaide"),
    (-33.8688, 151.2093, "Australia/Sydney"),
    (-36.8485, 174.7633, "Pacific/Auckland"),
]
NEW_YORK = (40.7128, -74.0060)  # (from memory)
BERLIN = (52.5200, 13.4050)  # (from memory)
SYDNEY = (-33.8688, 151.2093)  # (from memory)
MID_ATLANTIC = (30.0, -40.0)  # open sea, about 1,500 km from any coast (from memory)


def _zone_tab_rows() -> list[tuple[str, float, float, str]]:
    """(alpha-2, lat, lon, zone) for each line of tzdata's zone.tab, in file order."""
    text = resources.files("tzdata.zoneinfo").joinpath("zone.tab").read_text(encoding="utf-8")
    rows = []
    for line in text.splitlines():
        if line.startswith("#") or not line.strip():
            continue
        code, coordinates, zone = line.split("\t")[:3]
        lat, lon = _iso6709(coordinates)
        rows.append((code, lat, lon, zone))
    return rows


def _iso6709(text: str) -> tuple[float, float]:
    """zone.tab's ±DDMM[SS]±DDDMM[SS] coordinates as decimal degrees."""
    m = re.fullmatch(r"([+-])(\d\d)(\d\d)(\d\d)?([+-])(\d{3})(\d\d)(\d\d)?", text)
    assert m, text
    lat = int(m[2]) + int(m[3]) / 60 + int(m[4] or 0) / 3600
    lon = int(m[6]) + int(m[7]) / 60 + int(m[8] or 0) / 3600
    return (-lat if m[1] == "-" else lat), (-lon if m[5] == "-" else lon)


ZONE_TAB = _zone_tab_rows()


def _first_zone_tab_zone(alpha2: str) -> str | None:
    return next((zone for code, _, _, zone in ZONE_TAB if code == alpha2), None)


def _zoneinfo_hour_dow(ts: float, zone: str) -> tuple[int, int]:
    local = datetime.fromtimestamp(ts, ZoneInfo(zone))
    return local.hour, local.weekday()


def _fixed_hour_dow(ts: float, minutes: int) -> tuple[int, int]:
    local = datetime.fromtimestamp(ts, timezone(timedelta(minutes=minutes)))
    return local.hour, local.weekday()


def _utc_ts(*args: int) -> int:
    return int(datetime(*args, tzinfo=UTC).timestamp())


# --- which hint resolves the zone ---------------------------------------------------


def test_utcoffset_wins_over_lat_lon_and_country() -> None:
    zone, path = resolve_zone(60, *NEW_YORK, "USA")
    assert path == "utcoffset"
    assert zone.utcoffset(None) == timedelta(minutes=60)
    ts = _utc_ts(2026, 7, 1, 12, 0, 0)
    # reference: datetime with a fixed +01:00 timezone, not New York's zoneinfo
    assert local_hour_dow(ts, 60, *NEW_YORK, "USA") == _fixed_hour_dow(ts, 60) == (13, 2)


def test_zero_utcoffset_counts_as_present() -> None:
    zone, path = resolve_zone(0, *BERLIN, "DEU")
    assert (path, zone.utcoffset(None)) == ("utcoffset", timedelta(0))
    ts = _utc_ts(2026, 7, 1, 12, 0, 0)
    # reference: datetime at UTC; Berlin (zoneinfo) would say 14
    assert local_hour_dow(ts, 0, *BERLIN, "DEU") == _fixed_hour_dow(ts, 0) == (12, 2)


def test_offset_of_a_day_or_more_is_ignored() -> None:
    assert resolve_zone(1440, *BERLIN, None) == (ZoneInfo("Europe/Berlin"), "latlon")
    assert resolve_zone(-1440, None, None, "JPN") == (ZoneInfo("Asia/Tokyo"), "country")


def test_lat_lon_wins_over_country() -> None:
    # reference: zoneinfo key of the city's IANA zone (from memory)
    assert resolve_zone(None, *BERLIN, "JPN") == (ZoneInfo("Europe/Berlin"), "latlon")
    ts = _utc_ts(2026, 1, 15, 23, 30, 0)
    assert local_hour_dow(ts, None, *BERLIN, "JPN") == _zoneinfo_hour_dow(ts, "Europe/Berlin")


@pytest.mark.parametrize(("lat", "lon", "zone"), CITIES)
def test_city_points_resolve_to_their_zone(lat: float, lon: float, zone: str) -> None:
    # reference: the city's IANA zone (from memory)
    assert resolve_zone(None, lat, lon, None) == (ZoneInfo(zone), "latlon")


def test_zone_tab_principal_cities_resolve_to_their_zone() -> None:
    # reference: zone.tab pairs each zone with its principal city; the only exception
    # allowed is Monaco, whose point timezonefinder puts in Europe/Paris, which zoneinfo
    # shows to keep the same clock as Europe/Monaco throughout 2000-2035.
    mismatched = []
    for _, lat, lon, zone in ZONE_TAB:
        found, path = resolve_zone(None, lat, lon, None)
        assert path == "latlon", (zone, lat, lon)
        if str(found) != zone:
            mismatched.append((zone, str(found)))
    assert set(mismatched) <= {("Europe/Monaco", "Europe/Paris")}
    paris, monaco = ZoneInfo("Europe/Paris"), ZoneInfo("Europe/Monaco")
    for ts in range(START_2000, END_2035, 3600 * 6):
        assert datetime.fromtimestamp(ts, paris).utcoffset() == (
            datetime.fromtimestamp(ts, monaco).utcoffset()
        )


def test_sea_point_falls_through_to_country() -> None:
    # reference: zone.tab's first line for DE (Europe/Berlin)
    assert resolve_zone(None, *MID_ATLANTIC, "DEU") == (ZoneInfo("Europe/Berlin"), "country")
    # timezonefinder does match a sea zone there; only land zones may be used
    sea_zone = TimezoneFinder().timezone_at(lat=MID_ATLANTIC[0], lng=MID_ATLANTIC[1])
    assert sea_zone is not None
    assert sea_zone.startswith("Etc/GMT")
    ts = _utc_ts(2026, 7, 1, 22, 30, 0)
    assert local_hour_dow(ts, None, *MID_ATLANTIC, "JPN") == _zoneinfo_hour_dow(ts, "Asia/Tokyo")


def test_null_island_placeholder_falls_through_to_country() -> None:
    # 0,0 is in the Gulf of Guinea; zone.tab's first FR line is Europe/Paris
    assert resolve_zone(None, 0.0, 0.0, "FRA") == (ZoneInfo("Europe/Paris"), "country")


def test_half_a_point_falls_through_to_country() -> None:
    assert resolve_zone(None, BERLIN[0], None, "JPN") == (ZoneInfo("Asia/Tokyo"), "country")
    assert resolve_zone(None, None, BERLIN[1], "JPN") == (ZoneInfo("Asia/Tokyo"), "country")


@pytest.mark.parametrize(("lat", "lon"), [(91.0, 0.0), (0.0, 181.0), (math.nan, 10.0)])
def test_point_off_the_globe_falls_through_to_country(lat: float, lon: float) -> None:
    assert resolve_zone(None, lat, lon, "JPN") == (ZoneInfo("Asia/Tokyo"), "country")


@pytest.mark.parametrize("country", ["XXX", "ZZZ", "", "DE", "Germany", None])
def test_unknown_country_falls_back_to_utc(country: str | None) -> None:
    assert resolve_zone(None, *MID_ATLANTIC, country) == (UTC, "utc")
    assert resolve_zone(None, None, None, country) == (UTC, "utc")
    ts = _utc_ts(2026, 3, 1, 23, 59, 59)
    # reference: datetime at UTC; 2026-03-01 is a Sunday
    assert local_hour_dow(ts, None, None, None, country) == _fixed_hour_dow(ts, 0) == (23, 6)


def test_country_without_zone_tab_line_falls_back_to_utc() -> None:
    # Bouvet Island is in ISO 3166-1 but has no line in zone.tab
    assert pycountry.countries.get(alpha_3="BVT").alpha_2 == "BV"
    assert _first_zone_tab_zone("BV") is None
    assert resolve_zone(None, None, None, "BVT") == (UTC, "utc")


# --- country → zone through zone.tab ------------------------------------------------


@pytest.mark.parametrize(
    ("alpha3", "expected"),
    [("DEU", "Europe/Berlin"), ("JPN", "Asia/Tokyo"), ("USA", "America/New_York")],
)
def test_country_examples(alpha3: str, expected: str) -> None:
    # reference: first zone.tab line for the ISO 3166-1 alpha-2 code; expected (from memory)
    alpha2 = pycountry.countries.get(alpha_3=alpha3).alpha_2
    assert _first_zone_tab_zone(alpha2) == expected
    assert resolve_zone(None, None, None, alpha3) == (ZoneInfo(expected), "country")


def test_country_with_many_zones_takes_first_zone_tab_line() -> None:
    # reference: zone.tab order; Mexico has several lines, so the answer depends on it
    mexico = [zone for code, _, _, zone in ZONE_TAB if code == "MX"]
    assert len(mexico) > 1
    assert resolve_zone(None, None, None, "MEX") == (ZoneInfo(mexico[0]), "country")


@pytest.mark.parametrize(("alpha3", "zone"), sorted(LARGEST_CITY_ZONE.items()))
def test_largest_city_overrides_are_zones_of_that_country(alpha3: str, zone: str) -> None:
    # reference: zone.tab lists the override zone under the same country (ISO 3166-1
    # through pycountry), so the override never moves a user to another country's clock
    alpha2 = pycountry.countries.get(alpha_3=alpha3).alpha_2
    assert zone in [z for code, _, _, z in ZONE_TAB if code == alpha2]
    assert _first_zone_tab_zone(alpha2) != zone
    assert resolve_zone(None, None, None, alpha3) == (ZoneInfo(zone), "country")


def test_lower_case_country_code() -> None:
    assert resolve_zone(None, None, None, "deu") == (ZoneInfo("Europe/Berlin"), "country")


def test_every_iso_country_maps_to_its_first_zone_tab_line() -> None:
    # reference: ISO 3166-1 through pycountry, joined with zone.tab
    for country in pycountry.countries:
        expected = LARGEST_CITY_ZONE.get(country.alpha_3) or _first_zone_tab_zone(country.alpha_2)
        zone, path = resolve_zone(None, None, None, country.alpha_3)
        if expected is None:
            assert (zone, path) == (UTC, "utc"), country.alpha_3
        else:
            assert (zone, path) == (ZoneInfo(expected), "country"), country.alpha_3


# --- DST changes ----------------------------------------------------------------------

# (point, zone, UTC instant of the change, hour just before, hour just after); the dates
# and local hours are from memory, the instants are checked against zoneinfo below.
DST_CHANGES = [
    pytest.param(NEW_YORK, "America/New_York", (2026, 3, 8, 7), 1, 3, id="new-york-spring"),
    pytest.param(NEW_YORK, "America/New_York", (2026, 11, 1, 6), 1, 1, id="new-york-autumn"),
    pytest.param(BERLIN, "Europe/Berlin", (2026, 3, 29, 1), 1, 3, id="berlin-spring"),
    pytest.param(BERLIN, "Europe/Berlin", (2026, 10, 25, 1), 2, 2, id="berlin-autumn"),
    pytest.param(SYDNEY, "Australia/Sydney", (2026, 10, 3, 16), 1, 3, id="sydney-spring"),
    pytest.param(SYDNEY, "Australia/Sydney", (2026, 4, 4, 16), 2, 2, id="sydney-autumn"),
]


@pytest.mark.parametrize(("point", "zone", "utc", "before", "after"), DST_CHANGES)
def test_hour_either_side_of_dst_change(
    point: tuple[float, float], zone: str, utc: tuple[int, ...], before: int, after: int
) -> None:
    change = _utc_ts(*utc)
    info = ZoneInfo(zone)
    # reference: zoneinfo says the offset really changes at this instant
    offset_before = datetime.fromtimestamp(change - 1, info).utcoffset()
    offset_after = datetime.fromtimestamp(change, info).utcoffset()
    assert offset_before is not None
    assert offset_after is not None
    assert abs(offset_after - offset_before) == timedelta(hours=1)
    for ts, hour in [(change - 1, before), (change, after), (change - 0.25, before)]:
        # reference: datetime.fromtimestamp(ts, ZoneInfo(zone))
        got = local_hour_dow(ts, None, *point, None)
        assert got == _zoneinfo_hour_dow(ts, zone)
        assert got[0] == hour


def test_sydney_sunday_while_utc_is_saturday() -> None:
    # 2026-10-04 03:00 AEDT, the first hour of summer time, is Saturday 16:00 UTC
    ts = _utc_ts(2026, 10, 3, 16, 0, 0)
    assert _fixed_hour_dow(ts, 0)[1] == 5
    # reference: zoneinfo Australia/Sydney
    assert local_hour_dow(ts, None, *SYDNEY, None) == _zoneinfo_hour_dow(ts, "Australia/Sydney")
    assert local_hour_dow(ts, None, *SYDNEY, None) == (3, 6)


# --- the day flips at local midnight -------------------------------------------------


@pytest.mark.parametrize(
    ("minutes", "local_midnight_utc"),
    [
        (-300, (2026, 3, 10, 5, 0)),  # 2026-03-10 00:00 at -05:00
        (-210, (2026, 3, 10, 3, 30)),  # -03:30
        (0, (2026, 3, 10, 0, 0)),
        (60, (2026, 3, 9, 23, 0)),  # +01:00
        (330, (2026, 3, 9, 18, 30)),  # +05:30
        (345, (2026, 3, 9, 18, 15)),  # +05:45
        (840, (2026, 3, 9, 10, 0)),  # +14:00
    ],
)
def test_fixed_offset_day_flips_at_local_midnight(
    minutes: int, local_midnight_utc: tuple[int, ...]
) -> None:
    midnight = _utc_ts(*local_midnight_utc, 0)
    # reference: datetime with timezone(timedelta(minutes)); 2026-03-10 is a Tuesday
    assert _fixed_hour_dow(midnight, minutes) == (0, 1)
    assert local_hour_dow(midnight, minutes, None, None, None) == (0, 1)
    assert local_hour_dow(midnight - 1, minutes, None, None, None) == (23, 0)
    assert local_hour_dow(midnight - 0.25, minutes, None, None, None) == (23, 0)


def test_zone_day_flips_at_local_midnight_not_utc_midnight() -> None:
    tokyo = (35.6762, 139.6503)  # (from memory)
    midnight = _utc_ts(2026, 3, 9, 15, 0, 0)  # Tuesday 00:00 in Tokyo (+09:00, no DST)
    # reference: zoneinfo Asia/Tokyo
    assert local_hour_dow(midnight - 1, None, *tokyo, None) == (23, 0)
    assert local_hour_dow(midnight, None, *tokyo, None) == (0, 1)
    assert _zoneinfo_hour_dow(midnight, "Asia/Tokyo") == (0, 1)
    # UTC midnight that day changes nothing in Tokyo
    utc_midnight = _utc_ts(2026, 3, 10, 0, 0, 0)
    assert local_hour_dow(utc_midnight - 1, None, *tokyo, None)[1] == 1
    assert local_hour_dow(utc_midnight, None, *tokyo, None) == (9, 1)


def test_fraction_of_a_second_before_the_hour_stays_in_the_hour_before() -> None:
    hour = _utc_ts(2026, 6, 1, 10, 0, 0)
    just_before = math.nextafter(hour, -math.inf)
    # datetime rounds this up to the hour; the instant is still before it
    assert datetime.fromtimestamp(just_before, UTC).hour == 10
    assert local_hour_dow(just_before, 0, None, None, None) == _fixed_hour_dow(hour - 1, 0)
    # reference: zoneinfo Europe/Berlin one whole second before the hour
    expected = _zoneinfo_hour_dow(hour - 1, "Europe/Berlin")
    assert local_hour_dow(just_before, None, *BERLIN, None) == expected


# --- properties -------------------------------------------------------------------------

timestamps = st.integers(min_value=START_2000, max_value=END_2035)


@settings(deadline=None, max_examples=500)
@given(ts=timestamps, city=st.sampled_from(CITIES))
def test_city_points_match_zoneinfo(ts: int, city: tuple[float, float, str]) -> None:
    lat, lon, zone = city
    # reference: datetime.fromtimestamp(ts, ZoneInfo(zone))
    assert local_hour_dow(ts, None, lat, lon, None) == _zoneinfo_hour_dow(ts, zone)


@settings(deadline=None, max_examples=500)
@given(ts=timestamps, row=st.sampled_from(ZONE_TAB))
def test_zone_tab_points_match_zoneinfo(ts: int, row: tuple[str, float, float, str]) -> None:
    _, lat, lon, zone = row
    # reference: zoneinfo for the zone zone.tab names at that point
    assert local_hour_dow(ts, None, lat, lon, None) == _zoneinfo_hour_dow(ts, zone)


@settings(deadline=None, max_examples=500)
@given(ts=timestamps, minutes=st.integers(min_value=-720, max_value=840))
def test_fixed_offsets_match_datetime(ts: int, minutes: int) -> None:
    # reference: datetime with timezone(timedelta(minutes=minutes))
    assert local_hour_dow(ts, minutes, None, None, None) == _fixed_hour_dow(ts, minutes)


@settings(deadline=None, max_examples=300)
@given(
    ts=timestamps,
    offset=st.none() | st.integers(min_value=-720, max_value=840),
    point=st.none() | st.tuples(st.floats(-90, 90), st.floats(-180, 180)),
    country=st.none() | st.sampled_from([c.alpha_3 for c in pycountry.countries] + ["XXX"]),
)
def test_local_hour_dow_agrees_with_resolve_zone(
    ts: int, offset: int | None, point: tuple[float, float] | None, country: str | None
) -> None:
    lat, lon = point if point is not None else (None, None)
    zone, path = resolve_zone(offset, lat, lon, country)
    assert path in {"utcoffset", "latlon", "country", "utc"}
    # reference: datetime.fromtimestamp with the resolved zone (zoneinfo or fixed offset)
    local = datetime.fromtimestamp(ts, zone)
    assert local_hour_dow(ts, offset, lat, lon, country) == (local.hour, local.weekday())


# --- runtime ----------------------------------------------------------------------------


def test_warm_up_loads_finder_and_country_table() -> None:
    warm_up()
    assert isinstance(local_time._finder, TimezoneFinder)
    assert local_time._country_zones.cache_info().currsize == 1
    assert resolve_zone(None, None, None, "JPN") == (ZoneInfo("Asia/Tokyo"), "country")


def test_lookups_from_many_threads_match_zoneinfo() -> None:
    local_time._zone_name_at.cache_clear()
    points = [(lat + i * 1e-4, lon, zone) for i in range(50) for lat, lon, zone in CITIES]
    ts = _utc_ts(2026, 8, 15, 12, 0, 0)

    def look(point: tuple[float, float, str]) -> bool:
        lat, lon, zone = point
        # reference: zoneinfo for the city's zone
        return local_hour_dow(ts, None, lat, lon, None) == _zoneinfo_hour_dow(ts, zone)

    with ThreadPoolExecutor(max_workers=8) as pool:
        assert all(pool.map(look, points))
