"""Screen fraction against the OpenRTB 2.5 definitions, with IAB standard ad sizes.

OpenRTB 2.5 (section 3.2.18, Device): ``w``/``h`` are the physical screen size in pixels,
``pxratio`` the ratio of physical pixels to device-independent pixels; (section 3.2.6,
Banner): ``w``/``h`` are in device-independent pixels. IAB standard sizes 320x50
(mobile banner), 300x250 (medium rectangle) and 728x90 (leaderboard) serve as checks.
"""

from __future__ import annotations

import pytest

from tests.conftest import FEATUREDEFS
from windvane.definitions.plan import load_plan
from windvane.inputs.lookup_request import parse_lookup_request

PLAN = load_plan(FEATUREDEFS)
FEATURE = next(f for f in PLAN.features if f.name == "screen_fraction")


def fraction(request: dict) -> float | None:
    return FEATURE.read_request(parse_lookup_request(request))


@pytest.mark.parametrize(
    ("slot", "device", "expected"),
    [
        # 1080x1920 physical at pxratio 3 is a 360x640 dip screen.
        ((320, 50), (1080, 1920, 3.0), 320 * 50 / (360 * 640)),
        ((300, 250), (1080, 1920, 3.0), 300 * 250 / (360 * 640)),
        # A 1536x2048 tablet at pxratio 2 is 768x1024 dips; a leaderboard covers 728x90.
        ((728, 90), (1536, 2048, 2.0), 728 * 90 / (768 * 1024)),
        # Without pxratio the physical size is taken as dips (ratio 1).
        ((320, 50), (640, 1136, None), 320 * 50 / (640 * 1136)),
        # An interstitial larger than the screen is capped at 1.
        ((320, 480), (640, 960, 2.0), 1.0),
    ],
)
def test_openrtb_definitions(slot: tuple, device: tuple, expected: float) -> None:
    w, h, ratio = device
    dev = {"w": w, "h": h} | ({"pxratio": ratio} if ratio else {})
    got = fraction({"slot": {"w": slot[0], "h": slot[1]}, "device": dev})
    # reference: OpenRTB 2.5 sections 3.2.6 and 3.2.18 as above
    assert got == pytest.approx(expected, rel=1e-12)


def test_device_table_fallback_and_unknowns() -> None:
    table = FEATURE.table  # type: ignore[attr-defined]
    model, (w_dip, h_dip) = next(iter(table.items()))
    got = fraction({"slot": {"w": 320, "h": 50}, "device": {"model": model}})
    assert got == pytest.approx(320 * 50 / (w_dip * h_dip), rel=1e-12)
    assert fraction({"slot": {"w": 320, "h": 50}, "device": {"model": "no such model"}}) is None
    assert fraction({"slot": {"w": 320, "h": 50}}) is None
    assert fraction({"device": {"w": 1080, "h": 1920}}) is None
