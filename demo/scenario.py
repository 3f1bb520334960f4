"""The invented world the demo log is drawn from, and how its users behave in it.

Everything here is made up for the demo: the Harrowmere ad exchange, its apps,
campaigns, advertisers and device models. Only the geography is real (countries,
city coordinates and time zones), because local time is what the bidder's
features have to get right.

The behaviour curves (traffic, win rate and CTR by local hour, slot size and
screen fraction) are deliberately uneven, so that the features the engine
computes over this log have real differences to find.
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass
from importlib import resources
from random import Random

AD_NETWORK = "Harrowmere Exchange"
SDK_NAME = "HarrowmereSDK"

Size = tuple[int, int]

BANNER: Size = (320, 50)
MREC: Size = (300, 250)
LEADERBOARD: Size = (728, 90)
INTERSTITIAL: Size = (320, 480)
SLOT_SIZES: tuple[Size, ...] = (BANNER, MREC, LEADERBOARD, INTERSTITIAL)

TABLET_MIN_DIP_WIDTH = 600
CLICK_DELAY_MAX_S = 12 * 3600


@dataclass(frozen=True, slots=True)
class Device:
    """One row of devices.csv; ``w``/``h`` are physical pixels in portrait (OpenRTB 2.5)."""

    model: str
    os: str
    w: int
    h: int
    pxratio: float

    @property
    def dip_area(self) -> float:
        """Screen area in device-independent pixels, the unit slot sizes are given in."""
        return (self.w / self.pxratio) * (self.h / self.pxratio)

    @property
    def dip_width(self) -> float:
        return self.w / self.pxratio

    @property
    def tablet(self) -> bool:
        return self.dip_width >= TABLET_MIN_DIP_WIDTH


@dataclass(frozen=True, slots=True)
class App:
    """An app on the exchange; kids' apps are COPPA-directed and flag every request."""

    bundle: str
    name: str
    category: str
    weight: float
    coppa: bool = False


@dataclass(frozen=True, slots=True)
class Creative:
    id: str
    w: int
    h: int


@dataclass(frozen=True, slots=True)
class Campaign:
    """A campaign the bidder runs; ``countries``/``os`` of None mean no targeting."""

    id: str
    name: str
    advertiser: str
    base_cpm: float
    weight: float
    creatives: tuple[Creative, ...]
    countries: tuple[str, ...] | None = None
    os: str | None = None
    kids_ok: bool = False

    def creatives_of(self, size: Size) -> tuple[Creative, ...]:
        return tuple(c for c in self.creatives if (c.w, c.h) == size)


@dataclass(frozen=True, slots=True)
class Country:
    """A market: its share of users, how many of them are on ios, and its price level."""

    code: str
    weight: float
    ios_share: float
    price_factor: float


@dataclass(frozen=True, slots=True)
class City:
    """A home city that users live around; ``tz`` is its IANA time zone."""

    name: str
    country: str
    lat: float
    lon: float
    tz: str
    weight: float


def load_devices() -> tuple[Device, ...]:
    """Read the shipped device table, in file order so that draws from it are reproducible."""
    text = resources.files("windvane_demo").joinpath("devices.csv").read_text(encoding="utf-8")
    rows = csv.DictReader(text.splitlines())
    return tuple(
        Device(
            model=row["model"],
            os=row["os"],
            w=int(row["w"]),
            h=int(row["h"]),
            pxratio=float(row["pxratio"]),
        )
        for row in rows
    )


APPS: tuple[App, ...] = (
    App("com.mossharbor.tilecascade", "Tile Cascade", "puzzle", 9.0),
    App("com.mossharbor.gembridge", "Gem Bridge", "puzzle", 6.0),
    App("io.brassmoth.orbiteegolf", "Orbitee Golf", "casual", 5.0),
    App("io.brassmoth.paperfleet", "Paper Fleet", "casual", 4.0),
    App("net.tallowfen.wordloom", "Word Loom", "word", 6.0),
    App("net.tallowfen.crossquill", "Crossquill", "word", 3.0),
    App("com.ninebarrow.duneskipper", "Dune Skipper", "arcade", 5.0),
    App("com.ninebarrow.stackhaven", "Stack Haven", "arcade", 3.5),
    App("dev.emberlake.minekeeper", "Mine Keeper", "idle", 4.0),
    App("dev.emberlake.farmlet", "Farmlet", "idle", 3.0),
    App("io.cobaltfinch.chessnook", "Chess Nook", "board", 2.5),
    App("io.cobaltfinch.solitidal", "Solitidal", "board", 4.5),
    App("com.saltmarsh.dailyfold", "Daily Fold", "news", 5.0),
    App("com.saltmarsh.weatherwisp", "Weather Wisp", "news", 7.0),
    App("org.inkcairn.longreads", "Inkcairn", "news", 2.0),
    App("org.inkcairn.panelpocket", "Panel Pocket", "news", 2.5),
    App("app.quillbrook.flashlamp", "Flashlamp", "utility", 3.0),
    App("app.quillbrook.qrnest", "QR Nest", "utility", 2.0),
    App("app.quillbrook.unitfox", "Unit Fox", "utility", 1.5),
    App("io.hushwren.sleepsounds", "Hush Wren", "utility", 2.5),
    App("io.hushwren.stepcount", "Step Wren", "utility", 2.0),
    App("com.rivetcrow.photomoss", "Photo Moss", "utility", 3.5),
    App("fm.tunewharf.radio", "Tune Wharf", "music", 4.0),
    App("fm.tunewharf.singalong", "Wharf Sing", "music", 1.5),
    App("com.gablenest.chatter", "Gable Chat", "social", 5.0),
    App("com.gablenest.kitchen", "Gable Kitchen", "social", 2.5),
    App("com.ninebarrow.kids.crayonzoo", "Crayon Zoo", "kids", 3.0, coppa=True),
    App("io.brassmoth.kids.letterrocket", "Letter Rocket", "kids", 2.0, coppa=True),
    App("net.tallowfen.kids.puddlemath", "Puddle Math", "kids", 1.5, coppa=True),
    App("dev.emberlake.kids.bubblepals", "Bubble Pals", "kids", 1.5, coppa=True),
)

# Which slot sizes each kind of app offers on a phone, with weights. Games lean on
# interstitials between levels, readers on in-feed rectangles, utilities on banners.
PHONE_SLOT_MIX: dict[str, tuple[tuple[Size, float], ...]] = {
    "puzzle": ((BANNER, 0.45), (MREC, 0.15), (INTERSTITIAL, 0.40)),
    "casual": ((BANNER, 0.40), (MREC, 0.15), (INTERSTITIAL, 0.45)),
    "word": ((BANNER, 0.50), (MREC, 0.20), (INTERSTITIAL, 0.30)),
    "arcade": ((BANNER, 0.35), (MREC, 0.10), (INTERSTITIAL, 0.55)),
    "idle": ((BANNER, 0.55), (MREC, 0.20), (INTERSTITIAL, 0.25)),
    "board": ((BANNER, 0.55), (MREC, 0.25), (INTERSTITIAL, 0.20)),
    "news": ((BANNER, 0.40), (MREC, 0.50), (INTERSTITIAL, 0.10)),
    "utility": ((BANNER, 0.70), (MREC, 0.20), (INTERSTITIAL, 0.10)),
    "music": ((BANNER, 0.55), (MREC, 0.35), (INTERSTITIAL, 0.10)),
    "social": ((BANNER, 0.45), (MREC, 0.45), (INTERSTITIAL, 0.10)),
    "kids": ((BANNER, 0.30), (MREC, 0.20), (INTERSTITIAL, 0.50)),
}


def slot_mix(category: str, dip_width: float) -> tuple[tuple[Size, float], ...]:
    """Slot sizes an app offers on a screen this wide (in dips).

    A screen wide enough for a leaderboard gets one where a phone shows a banner;
    a small tablet keeps the banner, since slots never overflow the screen.
    """
    mix = PHONE_SLOT_MIX[category]
    if dip_width < LEADERBOARD[0]:
        return mix
    return tuple((LEADERBOARD if size == BANNER else size, w) for size, w in mix)


def _campaign(
    slug: str,
    name: str,
    advertiser: str,
    base_cpm: float,
    weight: float,
    sizes: tuple[Size, ...],
    countries: tuple[str, ...] | None = None,
    os: str | None = None,
    kids_ok: bool = False,
) -> Campaign:
    """Build a campaign whose creative ids say their size; a repeated size gets a new letter."""
    creatives: list[Creative] = []
    for w, h in sizes:
        variant = "abcdefgh"[sum(1 for c in creatives if (c.w, c.h) == (w, h))]
        creatives.append(Creative(f"cr-{slug}-{w}x{h}{variant}", w, h))
    return Campaign(
        id=f"cmp-{slug}",
        name=name,
        advertiser=advertiser,
        base_cpm=base_cpm,
        weight=weight,
        creatives=tuple(creatives),
        countries=countries,
        os=os,
        kids_ok=kids_ok,
    )


CAMPAIGNS: tuple[Campaign, ...] = (
    _campaign(
        "tidewater-cocoa",
        name="Winter Warmers",
        advertiser="Tidewater Cocoa",
        base_cpm=1.8,
        weight=6.0,
        sizes=(BANNER, MREC, LEADERBOARD, INTERSTITIAL),
    ),
    _campaign(
        "larkfield-shoes",
        name="Trail Season",
        advertiser="Larkfield Shoes",
        base_cpm=2.4,
        weight=4.0,
        sizes=(BANNER, MREC, LEADERBOARD, MREC),
    ),
    _campaign(
        "ember-rally",
        name="Ember Rally Install",
        advertiser="Ember Rally",
        base_cpm=4.5,
        weight=5.0,
        sizes=(BANNER, INTERSTITIAL, INTERSTITIAL, LEADERBOARD),
        os="ios",
    ),
    _campaign(
        "moss-mallow",
        name="Sunday Bakes",
        advertiser="Moss & Mallow",
        base_cpm=1.2,
        weight=3.0,
        sizes=(BANNER, MREC, LEADERBOARD),
    ),
    _campaign(
        "quarrystone-bank",
        name="Cashback Card",
        advertiser="Quarrystone Bank",
        base_cpm=5.5,
        weight=3.0,
        sizes=(MREC, LEADERBOARD, INTERSTITIAL),
        countries=("USA", "GBR"),
    ),
    _campaign(
        "cindertrail",
        name="Cindertrail Install",
        advertiser="Cindertrail RPG",
        base_cpm=3.8,
        weight=5.0,
        sizes=(BANNER, INTERSTITIAL, LEADERBOARD, INTERSTITIAL),
        os="android",
    ),
    _campaign(
        "hollowpeak",
        name="Base Camp Sale",
        advertiser="Hollowpeak Outdoor",
        base_cpm=2.0,
        weight=3.0,
        sizes=(BANNER, MREC, LEADERBOARD),
    ),
    _campaign(
        "saffron-loop",
        name="First Order Free",
        advertiser="Saffron Loop",
        base_cpm=0.9,
        weight=4.0,
        sizes=(BANNER, MREC, INTERSTITIAL),
        countries=("IND", "IDN"),
    ),
    _campaign(
        "pebbleton",
        name="Renters Cover",
        advertiser="Pebbleton Insurance",
        base_cpm=6.0,
        weight=2.0,
        sizes=(MREC, LEADERBOARD, INTERSTITIAL),
        countries=("USA",),
    ),
    _campaign(
        "brightwick-tea",
        name="Afternoon Blend",
        advertiser="Brightwick Tea",
        base_cpm=1.6,
        weight=3.0,
        sizes=(BANNER, MREC, LEADERBOARD),
        countries=("GBR", "IND", "AUS"),
    ),
    _campaign(
        "oxleigh-motors",
        name="Test Drive Days",
        advertiser="Oxleigh Motors",
        base_cpm=4.2,
        weight=2.5,
        sizes=(MREC, LEADERBOARD, INTERSTITIAL),
        countries=("DEU", "GBR", "AUS", "ZAF"),
    ),
    _campaign(
        "nimbleleaf",
        name="Fresh Basket",
        advertiser="Nimbleleaf Grocer",
        base_cpm=1.1,
        weight=3.0,
        sizes=(BANNER, MREC, LEADERBOARD),
        countries=("BRA", "MEX"),
    ),
    _campaign(
        "greyfen-travel",
        name="Late Getaways",
        advertiser="Greyfen Travel",
        base_cpm=3.0,
        weight=4.0,
        sizes=(BANNER, MREC, LEADERBOARD, INTERSTITIAL),
    ),
    _campaign(
        "fizzgarden",
        name="Summer Fizz",
        advertiser="Fizzgarden Soda",
        base_cpm=1.4,
        weight=5.0,
        sizes=(BANNER, BANNER, MREC, LEADERBOARD, INTERSTITIAL),
    ),
    _campaign(
        "tinkerwren-toys",
        name="Build-a-Boat",
        advertiser="Tinkerwren Toys",
        base_cpm=1.0,
        weight=2.0,
        sizes=(BANNER, MREC, LEADERBOARD, INTERSTITIAL),
        kids_ok=True,
    ),
    _campaign(
        "crayon-comet",
        name="Learn with Comet",
        advertiser="Crayon Comet",
        base_cpm=0.8,
        weight=2.0,
        sizes=(BANNER, INTERSTITIAL, LEADERBOARD),
        kids_ok=True,
    ),
    _campaign(
        "puddlestep-books",
        name="Bedtime Stories",
        advertiser="Puddlestep Books",
        base_cpm=0.7,
        weight=1.5,
        sizes=(BANNER, MREC, LEADERBOARD),
        kids_ok=True,
    ),
    _campaign(
        "arcwright",
        name="Three Months On Us",
        advertiser="Arcwright Streaming",
        base_cpm=3.5,
        weight=4.0,
        sizes=(BANNER, MREC, LEADERBOARD, INTERSTITIAL),
    ),
    _campaign(
        "mirelake-hotels",
        name="City Breaks",
        advertiser="Mirelake Hotels",
        base_cpm=2.8,
        weight=3.0,
        sizes=(MREC, LEADERBOARD, INTERSTITIAL),
    ),
    _campaign(
        "glimmerfox",
        name="Glow Kit",
        advertiser="Glimmerfox Cosmetics",
        base_cpm=2.2,
        weight=3.5,
        sizes=(BANNER, MREC, LEADERBOARD, INTERSTITIAL),
    ),
    _campaign(
        "kumowara-ramen",
        name="Noodle Night",
        advertiser="Kumowara Ramen",
        base_cpm=2.0,
        weight=2.0,
        sizes=(BANNER, MREC, LEADERBOARD),
        countries=("JPN",),
    ),
    _campaign(
        "jacarel-fibre",
        name="Gigabit Home",
        advertiser="Jacarel Fibre",
        base_cpm=3.2,
        weight=2.0,
        sizes=(BANNER, MREC, LEADERBOARD),
        countries=("ZAF", "AUS"),
    ),
    _campaign(
        "sertao-coffee",
        name="Morning Roast",
        advertiser="Sertão Coffee",
        base_cpm=1.0,
        weight=2.0,
        sizes=(BANNER, MREC),
        countries=("BRA",),
    ),
    _campaign(
        "copperbeech",
        name="January Strong",
        advertiser="Copperbeech Fitness",
        base_cpm=2.6,
        weight=3.0,
        sizes=(BANNER, MREC, LEADERBOARD, INTERSTITIAL),
        countries=("USA", "DEU", "GBR"),
    ),
    _campaign(
        "drumlin-lingo",
        name="Speak in 30 Days",
        advertiser="Drumlin Lingo",
        base_cpm=2.9,
        weight=4.0,
        sizes=(BANNER, MREC, LEADERBOARD, INTERSTITIAL),
    ),
)

COUNTRIES: tuple[Country, ...] = (
    Country("USA", 24.0, 0.55, 1.00),
    Country("BRA", 12.0, 0.15, 0.35),
    Country("DEU", 8.0, 0.35, 0.90),
    Country("GBR", 8.0, 0.50, 0.95),
    Country("IND", 14.0, 0.05, 0.15),
    Country("JPN", 7.0, 0.65, 0.85),
    Country("AUS", 5.0, 0.50, 0.85),
    Country("ZAF", 4.0, 0.20, 0.30),
    Country("MEX", 8.0, 0.20, 0.35),
    Country("IDN", 10.0, 0.08, 0.15),
)

CITIES: tuple[City, ...] = (
    City("New York", "USA", 40.7128, -74.0060, "America/New_York", 8.0),
    City("Miami", "USA", 25.7617, -80.1918, "America/New_York", 3.0),
    City("Chicago", "USA", 41.8781, -87.6298, "America/Chicago", 5.0),
    City("Denver", "USA", 39.7392, -104.9903, "America/Denver", 2.0),
    City("Phoenix", "USA", 33.4484, -112.0740, "America/Phoenix", 2.0),
    City("Los Angeles", "USA", 34.0522, -118.2437, "America/Los_Angeles", 6.0),
    City("Anchorage", "USA", 61.2181, -149.9003, "America/Anchorage", 0.5),
    City("Honolulu", "USA", 21.3069, -157.8583, "Pacific/Honolulu", 0.7),
    City("São Paulo", "BRA", -23.5505, -46.6333, "America/Sao_Paulo", 6.0),
    City("Rio de Janeiro", "BRA", -22.9068, -43.1729, "America/Sao_Paulo", 4.0),
    City("Manaus", "BRA", -3.1190, -60.0217, "America/Manaus", 1.5),
    City("Berlin", "DEU", 52.5200, 13.4050, "Europe/Berlin", 4.0),
    City("Hamburg", "DEU", 53.5511, 9.9937, "Europe/Berlin", 2.0),
    City("Munich", "DEU", 48.1351, 11.5820, "Europe/Berlin", 2.0),
    City("London", "GBR", 51.5074, -0.1278, "Europe/London", 6.0),
    City("Manchester", "GBR", 53.4808, -2.2426, "Europe/London", 2.0),
    City("Mumbai", "IND", 19.0760, 72.8777, "Asia/Kolkata", 5.0),
    City("Delhi", "IND", 28.7041, 77.1025, "Asia/Kolkata", 5.0),
    City("Bengaluru", "IND", 12.9716, 77.5946, "Asia/Kolkata", 4.0),
    City("Tokyo", "JPN", 35.6762, 139.6503, "Asia/Tokyo", 6.0),
    City("Osaka", "JPN", 34.6937, 135.5023, "Asia/Tokyo", 3.0),
    City("Sydney", "AUS", -33.8688, 151.2093, "Australia/Sydney", 4.0),
    City("Melbourne", "AUS", -37.8136, 144.9631, "Australia/Melbourne", 3.5),
    City("Brisbane", "AUS", -27.4698, 153.0251, "Australia/Brisbane", 2.0),
    City("Adelaide", "AUS", -34.9285, 138.6007, "Australia/Adelaide", 1.0),
    City("Perth", "AUS", -31.9505, 115.8605, "Australia/Perth", 1.5),
    City("Johannesburg", "ZAF", -26.2041, 28.0473, "Africa/Johannesburg", 3.0),
    City("Cape Town", "ZAF", -33.9249, 18.4241, "Africa/Johannesburg", 2.0),
    City("Mexico City", "MEX", 19.4326, -99.1332, "America/Mexico_City", 6.0),
    City("Tijuana", "MEX", 32.5149, -117.0382, "America/Tijuana", 1.5),
    City("Cancún", "MEX", 21.1619, -86.8515, "America/Cancun", 1.0),
    City("Jakarta", "IDN", -6.2088, 106.8456, "Asia/Jakarta", 6.0),
    City("Surabaya", "IDN", -7.2575, 112.7521, "Asia/Jakarta", 2.5),
    City("Makassar", "IDN", -5.1477, 119.4327, "Asia/Makassar", 1.5),
    City("Jayapura", "IDN", -2.5337, 140.7181, "Asia/Jayapura", 0.5),
)

# Relative traffic by the user's local hour: quiet before dawn, a lunch bump, the
# evening peak around 20:00-21:00. Its maximum is 1.0 so it doubles as an
# acceptance probability when drawing session start times.
TRAFFIC_BY_LOCAL_HOUR: tuple[float, ...] = (
    0.30, 0.18, 0.10, 0.07, 0.07, 0.10, 0.20, 0.40, 0.55, 0.55, 0.55, 0.60,
    0.70, 0.65, 0.55, 0.55, 0.60, 0.70, 0.85, 0.95, 1.00, 1.00, 0.80, 0.50,
)  # fmt: skip

# Other bidders crowd the evening peak, so the same bid wins less often then and
# more often at night.
WIN_FACTOR_BY_LOCAL_HOUR: tuple[float, ...] = (
    1.20, 1.25, 1.30, 1.30, 1.30, 1.25, 1.15, 1.05, 1.00, 1.00, 1.00, 0.95,
    0.95, 0.95, 1.00, 1.00, 0.95, 0.90, 0.85, 0.80, 0.80, 0.85, 0.95, 1.10,
)  # fmt: skip

# People click more when relaxed in the evening and least on the morning commute.
CTR_FACTOR_BY_LOCAL_HOUR: tuple[float, ...] = (
    1.10, 1.00, 0.95, 0.90, 0.85, 0.80, 0.75, 0.75, 0.80, 0.90, 0.95, 1.00,
    1.05, 1.00, 0.95, 0.95, 1.00, 1.05, 1.15, 1.25, 1.30, 1.30, 1.25, 1.15,
)  # fmt: skip

WIN_BASE: dict[Size, float] = {BANNER: 0.16, MREC: 0.20, LEADERBOARD: 0.18, INTERSTITIAL: 0.24}
CTR_BASE: dict[Size, float] = {
    BANNER: 0.0035,
    MREC: 0.0070,
    LEADERBOARD: 0.0040,
    INTERSTITIAL: 0.0150,
}
PRICE_BY_SLOT: dict[Size, float] = {BANNER: 0.5, MREC: 1.0, LEADERBOARD: 0.8, INTERSTITIAL: 2.2}


def win_probability(size: Size, screen_fraction: float, local_hour: int) -> float:
    """Chance our bid wins: a base rate by slot size, lowered the more of the screen the
    slot covers (it draws more competing bids) and at the crowded evening peak.
    """
    p = WIN_BASE[size] * (1.15 - 0.5 * screen_fraction) * WIN_FACTOR_BY_LOCAL_HOUR[local_hour]
    return min(max(p, 0.05), 0.45)


def click_probability(size: Size, screen_fraction: float, local_hour: int) -> float:
    """Chance an impression is clicked: the more of the screen an ad covers, the likelier."""
    p = CTR_BASE[size] * (0.7 + 1.2 * screen_fraction) * CTR_FACTOR_BY_LOCAL_HOUR[local_hour]
    return min(max(p, 0.001), 0.05)


_LOG_CLICK_DELAY_MEDIAN = math.log(10.0)


def click_delay(rng: Random) -> float:
    """Seconds from impression to click: mostly seconds, with a long tail of hours.

    Log-normal, because most clicks are immediate taps while some users come back
    to an ad much later; capped at 12 hours, after which nobody counts a click.
    """
    return min(1.0 + math.exp(rng.gauss(_LOG_CLICK_DELAY_MEDIAN, 2.5)), CLICK_DELAY_MAX_S)
