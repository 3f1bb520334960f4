"""OpenRTB bid requests mapped to lookup requests: the published examples, fallbacks, errors.

The example requests follow the bid request examples published with OpenRTB (IAB Tech
Lab, "OpenRTB API Specification Version 2.5", section 6.2, and the same examples in the
openrtb2.x repository under jsonschema/examples/bid-requests/), trimmed to the fields
the mapping reads, with their published values. Section numbers for objects are those
of the 2.6 document (checked), which numbers them as 2.5 does.
"""

from __future__ import annotations

import copy
import string
import time

import pytest
from hypothesis import given
from hypothesis import strategies as st

from windvane.errors import BadRequest
from windvane.inputs.lookup_request import LookupRequest
from windvane.inputs.openrtb import lookups_from_bid_request
from windvane.inputs.rtb_objects import Device, Geo, Slot

TS = 1_796_117_400.0  # 2026-12-01T09:30:00Z

# 2.5 §6.2.3 "Mobile", as jsonschema/examples/bid-requests/mobile-app.json (checked).
MOBILE_APP = {
    "id": "IxexyLDIIk",
    "imp": [{"id": "1", "banner": {"w": 728, "h": 90}}],
    "app": {"id": "agltb3B1Yi1pbmNyDAsSA0FwcBiJkfIUDA", "bundle": "12345"},
    "device": {
        "ua": "Mozilla/5.0 (iPhone; CPU iPhone OS 6_1 like Mac OS X) AppleWebKit/534.46 "
        "(KHTML, like Gecko) Version/5.1 Mobile/9A334 Safari/7534.48.3",
        "ifa": "AA000DFE74168477C70D291f574D344790E0BB11",
        "model": "iPhone",
        "os": "iOS",
    },
    "user": {"id": "ffffffd5135596709273b3a1a07e466ea2bf4fff"},
}

# 2.5 §6.2.1 "Simple Banner", as jsonschema/examples/bid-requests/simple-banner.json (checked).
SIMPLE_BANNER = {
    "id": "80ce30c53c16e6ede735f123ef6e32361bfc7b22",
    "imp": [{"id": "1", "bidfloor": 0.03, "banner": {"h": 250, "w": 300, "pos": 0}}],
    "site": {"id": "102855", "domain": "www.foobar.com"},
    "user": {"id": "55816b39711f9b5acf3b90e313ed29e51665623f"},
}

# 2.5 §6.2.4 "Video", as jsonschema/examples/bid-requests/video.json (checked); one
# companion banner kept to show that companion sizes are not taken for the slot.
VIDEO = {
    "id": "1234567893",
    "imp": [
        {
            "id": "1",
            "video": {
                "w": 640,
                "h": 480,
                "mimes": ["video/x-flv", "video/mp4", "application/javascript"],
                "companionad": [{"id": "1234567893-1", "w": 300, "h": 250}],
            },
        }
    ],
    "site": {"id": "1345135123"},
    "device": {
        "ua": "Mozilla/5.0 (Macintosh; U; Intel Mac OS X 10.6; en-US; rv:1.9.2.16) "
        "Gecko/20110319 Firefox/3.6.16",
        "os": "OS X",
    },
    "user": {"id": "456789876567897654678987656789"},
}


def one(bid_request: dict, **kwargs: object) -> LookupRequest:
    lookups = lookups_from_bid_request(bid_request, ts_s=TS, **kwargs)
    assert len(lookups) == 1
    return lookups[0][1]


def with_changes(base: dict, **changes: object) -> dict:
    """A deep copy of ``base`` with top-level fields replaced (None deletes the field)."""
    request = copy.deepcopy(base)
    for name, value in changes.items():
        if value is None:
            request.pop(name, None)
        else:
            request[name] = value
    return request


def test_mobile_app_example() -> None:
    # reference: OpenRTB 2.5 §6.2.3 Mobile / openrtb2.x mobile-app.json (checked)
    lookups = lookups_from_bid_request(MOBILE_APP, campaigns=("camp-1",), ts_s=TS)
    assert [imp_id for imp_id, _ in lookups] == ["1"]
    request = lookups[0][1]
    assert request.user == "AA000DFE74168477C70D291f574D344790E0BB11"
    assert request.app == "12345"
    assert request.slot == Slot(728, 90)
    assert request.device == Device(ua=MOBILE_APP["device"]["ua"], model="iPhone", os="iOS")
    assert request.geo is None
    assert request.campaigns == ("camp-1",)
    assert request.ts_s == TS
    assert not request.restricted


def test_simple_banner_example_is_a_site_request() -> None:
    # reference: OpenRTB 2.5 §6.2.1 Simple Banner / openrtb2.x simple-banner.json (checked)
    request = one(SIMPLE_BANNER)
    assert request.app is None
    assert request.user == "55816b39711f9b5acf3b90e313ed29e51665623f"
    assert request.slot == Slot(300, 250)
    assert request.device is None
    assert not request.coppa


def test_video_example_takes_the_player_size() -> None:
    # reference: OpenRTB 2.5 §6.2.4 Video / openrtb2.x video.json (checked); 2.6 §3.2.7
    # Video w/h are the player size in device-independent pixels (checked)
    request = one(VIDEO)
    assert request.slot == Slot(640, 480)
    assert request.user == "456789876567897654678987656789"
    assert request.device == Device(ua=VIDEO["device"]["ua"], os="OS X")


def test_banner_with_only_format_takes_the_first_format() -> None:
    # reference: OpenRTB 2.5 §3.2.6 Banner.format and §3.2.10 Format (2.6 text checked);
    # request written for this test
    request = one(
        with_changes(
            SIMPLE_BANNER,
            imp=[{"id": "1", "banner": {"format": [{"w": 320, "h": 50}, {"w": 300, "h": 250}]}}],
        )
    )
    assert request.slot == Slot(320, 50)


def test_banner_w_h_win_over_format_and_video() -> None:
    # reference: OpenRTB 2.6 §3.2.4 Imp (one imp may offer banner and video, checked);
    # request written for this test
    imp = {
        "id": "1",
        "banner": {"w": 300, "h": 250, "format": [{"w": 320, "h": 50}]},
        "video": {"w": 640, "h": 480, "mimes": ["video/mp4"]},
    }
    assert one(with_changes(SIMPLE_BANNER, imp=[imp])).slot == Slot(300, 250)


def test_flex_format_without_size_gives_no_slot() -> None:
    # reference: OpenRTB 2.6 §3.2.10 Format, wratio/hratio/wmin for Flex Ads (checked);
    # request written for this test
    imp = {"id": "1", "banner": {"format": [{"wratio": 16, "hratio": 9, "wmin": 320}]}}
    assert one(with_changes(SIMPLE_BANNER, imp=[imp])).slot is None


@pytest.mark.parametrize(
    "imp",
    [
        {"id": "1", "native": {"request": "{}"}},
        {"id": "1", "banner": {"format": []}},
        {"id": "1", "video": {"mimes": ["video/mp4"]}},
    ],
)
def test_imp_without_size_gives_no_slot(imp: dict) -> None:
    # reference: OpenRTB 2.6 §3.2.4 Imp, §3.2.9 Native (checked); requests written for this test
    assert one(with_changes(SIMPLE_BANNER, imp=[imp])).slot is None


def test_one_lookup_per_imp_in_order() -> None:
    # reference: OpenRTB 2.6 §3.2.4 Imp, id unique within the request (checked);
    # request written for this test on the mobile example
    imps = [
        {"id": "3", "banner": {"w": 320, "h": 50}},
        {"id": "1", "video": {"w": 640, "h": 360}},
        {"id": "2", "banner": {"format": [{"w": 300, "h": 250}]}},
    ]
    lookups = lookups_from_bid_request(with_changes(MOBILE_APP, imp=imps), ts_s=TS)
    assert [imp_id for imp_id, _ in lookups] == ["3", "1", "2"]
    assert [r.slot for _, r in lookups] == [Slot(320, 50), Slot(640, 360), Slot(300, 250)]
    assert {r.user for _, r in lookups} == {MOBILE_APP["device"]["ifa"]}
    assert {r.ts_s for _, r in lookups} == {TS}


def test_time_defaults_to_now() -> None:
    before = time.time()
    [(_, request)] = lookups_from_bid_request(MOBILE_APP)
    assert before <= request.ts_s <= time.time()


@pytest.mark.parametrize("ifa", [None, "00000000-0000-0000-0000-000000000000", "0000000000000000"])
def test_absent_or_all_zero_ifa_falls_back_to_user_id(ifa: str | None) -> None:
    # reference: OpenRTB 2.6 §3.2.18 Device.ifa, §3.2.20 User.id (checked); all-zero ids
    # under limited ad tracking (written from memory)
    device = dict(MOBILE_APP["device"], ifa=ifa)
    if ifa is None:
        del device["ifa"]
    request = one(with_changes(MOBILE_APP, device=device))
    assert request.user == "ffffffd5135596709273b3a1a07e466ea2bf4fff"


def test_no_ifa_and_no_user_gives_no_user() -> None:
    device = {k: v for k, v in MOBILE_APP["device"].items() if k != "ifa"}
    assert one(with_changes(MOBILE_APP, device=device, user=None)).user is None


def test_lmt_restricts_the_request() -> None:
    # reference: OpenRTB 2.5 §3.2.18 Device.lmt (2.6 text checked)
    request = one(with_changes(MOBILE_APP, device=dict(MOBILE_APP["device"], lmt=1)))
    assert request.device is not None
    assert request.device.lmt
    assert request.restricted


def test_coppa_restricts_the_request() -> None:
    # reference: OpenRTB 2.5 §3.2.3 Regs.coppa (2.6 text checked); gdpr and gpp ignored
    regs = {"coppa": 1, "gdpr": 1, "gpp": "DBABMA~CPXxRfAPXxRfAAfKABENB-CgAAAAAAAAAAYgAAAAAAAA"}
    request = one(with_changes(MOBILE_APP, regs=regs))
    assert request.coppa
    assert request.restricted


def test_coppa_zero_and_lmt_zero_do_not_restrict() -> None:
    device = dict(MOBILE_APP["device"], lmt=0)
    request = one(with_changes(MOBILE_APP, device=device, regs={"coppa": 0}))
    assert not request.restricted


def test_device_fields_and_device_geo() -> None:
    # reference: OpenRTB 2.6 §3.2.18 Device and §3.2.19 Geo (checked); request written
    # for this test on the mobile example
    device = dict(
        MOBILE_APP["device"],
        w=1170,
        h=2532,
        pxratio=3.0,
        geo={"country": "USA", "lat": 40.7128, "lon": -74.006, "utcoffset": -300, "type": 1},
    )
    user = {"id": "u-1", "geo": {"country": "CAN", "utcoffset": -240}}
    request = one(with_changes(MOBILE_APP, device=device, user=user))
    assert request.device == Device(
        ua=device["ua"], model="iPhone", os="iOS", w=1170, h=2532, pxratio=3.0
    )
    assert request.geo == Geo(country="USA", lat=40.7128, lon=-74.006, utcoffset=-300)


def test_user_geo_is_used_when_device_has_none() -> None:
    # reference: OpenRTB 2.6 §3.2.20 User.geo, the user's home base (checked); request
    # written for this test on the simple banner example
    user = dict(SIMPLE_BANNER["user"], geo={"country": "deu", "utcoffset": 60})
    request = one(with_changes(SIMPLE_BANNER, user=user))
    assert request.geo == Geo(country="DEU", utcoffset=60)


def test_unknown_fields_are_ignored() -> None:
    request = with_changes(
        MOBILE_APP,
        ext={"anything": [1, 2]},
        source={"tid": "abc"},
        regs={"gdpr": "not a flag", "ext": {}},
        at=2,
    )
    request["imp"][0]["ext"] = {"skadn": {"version": "2.0"}}
    request["device"]["sua"] = {"mobile": 1}
    assert one(request).slot == Slot(728, 90)


@pytest.mark.parametrize(
    ("changes", "field"),
    [
        ({"id": None}, "id"),
        ({"id": 17}, "id"),
        ({"imp": None}, "imp"),
        ({"imp": []}, "imp"),
        ({"imp": {"id": "1"}}, "imp"),
        ({"imp": ["1"]}, "imp[0]"),
        ({"imp": [{"banner": {"w": 300, "h": 250}}]}, "imp[0].id"),
        ({"imp": [{"id": 1}]}, "imp[0].id"),
        ({"imp": [{"id": "1"}, {"id": "1"}]}, "imp[1].id"),
        ({"imp": [{"id": "1", "banner": {"w": "300", "h": 250}}]}, "imp[0].banner.w"),
        ({"imp": [{"id": "1", "banner": {"w": 300}}]}, "imp[0].banner.h"),
        ({"imp": [{"id": "1", "banner": {"format": {"w": 1}}}]}, "imp[0].banner.format"),
        (
            {"imp": [{"id": "1", "banner": {"format": [{"w": 0, "h": 50}]}}]},
            "imp[0].banner.format[0].w",
        ),
        ({"imp": [{"id": "1", "video": {"w": 640, "h": -1}}]}, "imp[0].video.h"),
        ({"imp": [{"id": "1"}, {"id": "2", "banner": []}]}, "imp[1].banner"),
        ({"device": {"geo": {"lat": 91.0}}}, "device.geo.lat"),
        ({"device": {"geo": {"country": "US"}}}, "device.geo.country"),
        ({"device": {"w": "wide"}}, "device.w"),
        ({"device": {"lmt": 2}}, "device.lmt"),
        ({"device": "iPhone"}, "device"),
        ({"device": {"ifa": "AA000DFE 74168477"}}, "device.ifa"),
        ({"device": {"ifa": "{AA000DFE74168477}"}}, "device.ifa"),
        ({"device": {"ifa": 12345}}, "device.ifa"),
        ({"device": None, "user": {"id": "has space"}}, "user.id"),
        ({"device": None, "user": {"geo": {"lon": 181}}}, "user.geo.lon"),
        ({"user": ["u"]}, "user"),
        ({"app": {"bundle": 12345}}, "app.bundle"),
        ({"regs": {"coppa": "yes"}}, "regs.coppa"),
        ({"regs": 1}, "regs"),
    ],
)
def test_bad_fields_are_named_by_their_openrtb_path(changes: dict, field: str) -> None:
    # reference: OpenRTB 2.6 §3.2.1 BidRequest (id, imp required), §3.2.4 Imp (id required,
    # unique), §3.2.6 Banner, §3.2.10 Format, §3.2.18 Device, §3.2.19 Geo (checked)
    with pytest.raises(BadRequest) as err:
        lookups_from_bid_request(with_changes(MOBILE_APP, **changes), ts_s=TS)
    assert err.value.field == field


@pytest.mark.parametrize("bid_request", [None, [], "{}", 3])
def test_a_bid_request_must_be_an_object(bid_request: object) -> None:
    with pytest.raises(BadRequest) as err:
        lookups_from_bid_request(bid_request)
    assert err.value.field == ""


def test_fields_the_mapping_does_not_use_are_not_checked() -> None:
    # user.id is not read when device.ifa gives the user; user.geo not when device.geo is set
    user = {"id": "has space", "geo": {"lat": 1000}}
    device = dict(MOBILE_APP["device"], geo={"country": "USA"})
    request = one(with_changes(MOBILE_APP, user=user, device=device))
    assert request.user == MOBILE_APP["device"]["ifa"]
    assert request.geo == Geo(country="USA")


@pytest.mark.parametrize(
    ("kwargs", "field"),
    [
        ({"campaigns": ("ok", "bad id")}, "campaigns[1]"),
        ({"campaigns": "camp-1"}, "campaigns"),
        ({"ts_s": 1_796_117_400_000.0}, "ts"),
        ({"ts_s": float("nan")}, "ts"),
    ],
)
def test_bad_arguments_are_named(kwargs: dict, field: str) -> None:
    with pytest.raises(BadRequest) as err:
        lookups_from_bid_request(MOBILE_APP, **kwargs)
    assert err.value.field == field


def test_campaigns_are_deduplicated_in_order() -> None:
    request = one(MOBILE_APP, campaigns=("b", "a", "b"))
    assert request.campaigns == ("b", "a")


id_text = st.text(
    alphabet=string.ascii_letters + string.digits + "-._:", min_size=1, max_size=40
).filter(lambda s: s.strip("0-"))
free_text = st.one_of(st.none(), st.text(max_size=30))
sizes = st.integers(min_value=1, max_value=4000)


@given(
    ifa=st.one_of(st.none(), id_text),
    user_id=st.one_of(st.none(), id_text),
    ua=free_text,
    model=free_text,
    os=free_text,
    screen=st.one_of(st.none(), st.tuples(sizes, sizes)),
    pxratio=st.one_of(st.none(), st.floats(min_value=0.5, max_value=5)),
    lmt=st.sampled_from([None, 0, 1]),
    country=st.one_of(st.none(), st.text(alphabet=string.ascii_letters, min_size=3, max_size=3)),
    lat=st.one_of(st.none(), st.floats(min_value=-90, max_value=90)),
    lon=st.one_of(st.none(), st.floats(min_value=-180, max_value=180)),
    utcoffset=st.one_of(st.none(), st.integers(min_value=-720, max_value=840)),
    geo_on_user=st.booleans(),
    banner=st.tuples(sizes, sizes),
    as_format=st.booleans(),
)
def test_valid_values_round_trip(
    ifa: str | None,
    user_id: str | None,
    ua: str | None,
    model: str | None,
    os: str | None,
    screen: tuple[int, int] | None,
    pxratio: float | None,
    lmt: int | None,
    country: str | None,
    lat: float | None,
    lon: float | None,
    utcoffset: int | None,
    geo_on_user: bool,
    banner: tuple[int, int],
    as_format: bool,
) -> None:
    # reference: OpenRTB 2.6 §3.2.18 Device, §3.2.19 Geo, §3.2.6 Banner, §3.2.10 Format
    # (checked); values generated
    geo = {"country": country, "lat": lat, "lon": lon, "utcoffset": utcoffset}
    device = {"ua": ua, "model": model, "os": os, "pxratio": pxratio, "lmt": lmt, "ifa": ifa}
    if screen is not None:
        device["w"], device["h"] = screen
    user = {"id": user_id}
    (user if geo_on_user else device)["geo"] = geo
    size = {"w": banner[0], "h": banner[1]}
    imp = {"id": "1", "banner": {"format": [size]} if as_format else size}
    bid_request = {"id": "r", "imp": [imp], "device": device, "user": user}

    request = one(bid_request)

    assert request.user == (ifa if ifa is not None else user_id)
    assert request.device == Device(
        ua=ua,
        model=model,
        os=os,
        w=None if screen is None else screen[0],
        h=None if screen is None else screen[1],
        pxratio=pxratio,
        lmt=lmt == 1,
    )
    assert request.geo == Geo(
        country=None if country is None else country.upper(), lat=lat, lon=lon, utcoffset=utcoffset
    )
    assert request.slot == Slot(*banner)
    assert request.restricted == (lmt == 1)
