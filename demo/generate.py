"""Write a reproducible bidding log of the invented Harrowmere world, for demos and benchmarks.

The log is what a bidder's event pipe would carry over a day: bid requests, our bids,
win notices, impressions and clicks, in arrival order, in the mix of timestamp and
geo formats that real SDKs send, with a few late and a few broken lines. It is built
whole in memory and sorted, because clicks can follow their impression by hours
while the log has to come out in arrival order.

Everything random comes from one ``random.Random(seed)``, and nothing iterates a set
or a hash-ordered mapping, so the same arguments give byte-identical output in any
process. Times are integer milliseconds inside, so that rounding never reorders
stages of an auction.

Run ``python -m windvane_demo.generate --help`` for the command line.
"""

from __future__ import annotations

import argparse
import gc
import gzip
import math
import os
import sys
import time
from array import array
from bisect import bisect
from collections.abc import Iterable, Iterator, Sequence
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta, timezone
from itertools import accumulate
from pathlib import Path
from random import Random
from typing import Any, Protocol
from zoneinfo import ZoneInfo

import orjson

from . import scenario as sc

# Users are derived so that each one makes about this many requests a day (a few
# sessions); a week-long log gets fewer, busier-looking users rather than idle ones.
EVENTS_PER_USER_DAY = 40
# Log lines one request yields on average (its bid, win, impression, click); the
# planner draws a little more than needed and then thins whole auctions to the count.
LINES_PER_REQUEST = 1.74
OVERDRAW = 1.04

TABLET_SHARE = 0.10
LMT_SHARE = 0.07
BID_SHARE = 0.55
BID_SHARE_LMT = 0.40
IMPRESSION_SHARE = 0.95
RFC3339_SHARE = 0.05
LATE_SHARE = 0.005
MALFORMED_EVERY = 5000

SESSION_GAP_MIN_MS = 30 * 60 * 1000 + 1000
_LOG_20 = math.log(20.0)

REQUEST, BID, WIN, IMPRESSION, CLICK = range(5)
MALFORMATIONS = (
    "truncated",
    "unknown_kind",
    "missing_ts",
    "bad_ts",
    "negative_price",
    "non_numeric_size",
)
_MISSPELT_KIND = {
    "request": "requets",
    "bid": "bidd",
    "win": "winn",
    "impression": "impresion",
    "click": "clik",
}
_BAD_TS = ("yesterday", "tomorrow at noon", "2026-13-45T25:61:00Z", "")
_SLOT_JSON = {size: {"w": size[0], "h": size[1]} for size in sc.SLOT_SIZES}
_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)

# Campaigns that may bid on one kind of slot, each with its creatives of that size,
# and the running sums of their weights for drawing one.
_Bidders = tuple[list[tuple[sc.Campaign, tuple[sc.Creative, ...]]], list[float]]


class _Writable(Protocol):
    def write(self, data: bytes, /) -> int: ...


@dataclass(frozen=True, slots=True)
class DemoLog:
    """A finished log: its lines in arrival order, lookup requests, and what it covers."""

    lines: list[bytes]
    lookups: list[dict[str, Any]]
    start_ts: float
    end_ts: float
    users: int
    apps: int
    malformed: int


@dataclass(slots=True)
class _User:
    index: int
    id: str
    device: sc.Device
    device_json: dict[str, Any]
    lmt: bool
    country: sc.Country
    tz: str
    lat: float
    lon: float
    apps: list[int]
    app_cum: list[float]
    app_slots: list[tuple[list[sc.Size], list[float]]]
    screen_fraction: dict[sc.Size, float]
    activity: float
    geo_without_offset: tuple[dict[str, Any], ...]


def _cumulative(weights: Iterable[float]) -> list[float]:
    return list(accumulate(weights))


def _pick(rng: Random, cum: list[float]) -> int:
    """Index drawn with the weights whose running sums are ``cum``."""
    return bisect(cum, rng.random() * cum[-1])


class _LogBuilder:
    """Draws users, their sessions and auctions, then thins, breaks and orders the lines."""

    def __init__(
        self, seed: int, events: int, end_ts: float, hours: float, users: int | None
    ) -> None:
        self.rng = Random(seed)
        self.events = events
        self.end_ms = round(end_ts * 1000)
        self.start_ms = self.end_ms - round(hours * 3600 * 1000)
        self.planned_users = (
            users
            if users is not None
            else max(1, round(events / (EVENTS_PER_USER_DAY * hours / 24)))
        )
        self.devices = sc.load_devices()
        self.device_pools: dict[tuple[str, bool], list[sc.Device]] = {}
        for device in self.devices:
            self.device_pools.setdefault((device.os, device.tablet), []).append(device)
        self.country_cum = _cumulative(c.weight for c in sc.COUNTRIES)
        self.cities_of: dict[str, tuple[list[sc.City], list[float]]] = {}
        for country in sc.COUNTRIES:
            cities = [c for c in sc.CITIES if c.country == country.code]
            self.cities_of[country.code] = (cities, _cumulative(c.weight for c in cities))
        self.adult_apps = [i for i, a in enumerate(sc.APPS) if not a.coppa]
        self.kids_apps = [i for i, a in enumerate(sc.APPS) if a.coppa]
        self.slot_mixes: dict[tuple[str, bool], tuple[list[sc.Size], list[float]]] = {}
        self.eligible: dict[tuple[sc.Size, str, str, bool], _Bidders] = {}
        self.offsets: dict[tuple[str, int], int] = {}
        self.zones: dict[str, ZoneInfo] = {}
        self.fixed_zones: dict[int, timezone] = {}
        self.users: list[_User] = []

        self.arrivals = array("q")
        self.kinds = bytearray()
        self.auction_of = array("l")
        self.meta = array("l")
        self.lines: list[bytes] = []
        self.auction_sizes = array("l")

    def build(self) -> DemoLog:
        """Draw the world and its traffic, then cut it to exactly ``events`` lines."""
        per_request = self.events * OVERDRAW / LINES_PER_REQUEST
        planned = [self._make_user(i) for i in range(self.planned_users)]
        total_activity = sum(u.activity for u in planned) or 1.0
        for user in planned:
            self._user_traffic(user, max(1, round(per_request * user.activity / total_activity)))
        mean_target = max(1, round(per_request / max(1, self.planned_users)))
        while len(self.lines) < self.events:
            self._user_traffic(self._make_user(len(self.users)), mean_target)
        kept = self._thin()
        malformed = self._malform(kept)
        order = sorted(kept, key=self.arrivals.__getitem__)
        valid_requests = [
            self.meta[i] for i in kept if self.kinds[i] == REQUEST and self.meta[i] >= 0
        ]
        n_apps = len(sc.APPS)
        return DemoLog(
            lines=[self.lines[i] for i in order],
            lookups=self._lookups(valid_requests),
            start_ts=self.start_ms / 1000,
            end_ts=self.end_ms / 1000,
            users=len({m // n_apps for m in valid_requests}),
            apps=len({m % n_apps for m in valid_requests}),
            malformed=malformed,
        )

    # -- the world ---------------------------------------------------------------

    def _make_user(self, index: int) -> _User:
        """A user with a home city, a device, an app mix and how active they are.

        Everything that stays fixed for the user is worked out here once, so the
        per-request path only draws what changes.
        """
        rng = self.rng
        country = sc.COUNTRIES[_pick(rng, self.country_cum)]
        cities, city_cum = self.cities_of[country.code]
        city = cities[_pick(rng, city_cum)]
        os = "ios" if rng.random() < country.ios_share else "android"
        tablet = rng.random() < TABLET_SHARE
        pool = self.device_pools[(os, tablet)]
        device = pool[rng.randrange(len(pool))]
        lmt = rng.random() < LMT_SHARE
        os_version = (
            rng.choice(("16.7", "17.5", "18.2")) if os == "ios" else str(rng.randint(11, 15))
        )
        uid = f"{rng.getrandbits(128):032x}"
        sdk = f"{sc.SDK_NAME}/5.{rng.randint(0, 4)}"
        device_json = {
            "ua": f"{sdk} ({os} {os_version}; {device.model}; {device.w}x{device.h})",
            "model": device.model,
            "os": os,
            "w": device.w,
            "h": device.h,
            "pxratio": device.pxratio,
            "lmt": 1 if lmt else 0,
        }
        apps = self._app_mix(tablet)
        lat = round(city.lat + rng.uniform(-0.12, 0.12), 4)
        lon = round(city.lon + rng.uniform(-0.12, 0.12), 4)
        user = _User(
            index=index,
            id=uid,
            device=device,
            device_json=device_json,
            lmt=lmt,
            country=country,
            tz=city.tz,
            lat=lat,
            lon=lon,
            apps=apps,
            app_cum=_cumulative(rng.expovariate(1.0) + 0.05 for _ in apps),
            app_slots=[self._slot_mix(sc.APPS[i], device) for i in apps],
            screen_fraction={s: s[0] * s[1] / device.dip_area for s in sc.SLOT_SIZES},
            activity=min(rng.lognormvariate(0.0, 0.7), 4.0),
            geo_without_offset=(
                {"country": country.code, "lat": lat, "lon": lon},
                {"lat": lat, "lon": lon},
                {"country": country.code},
            ),
        )
        self.users.append(user)
        return user

    def _app_mix(self, tablet: bool) -> list[int]:
        """A user's home apps: a few general apps by popularity, sometimes a kids' app."""
        rng = self.rng
        pool = list(self.adult_apps)
        chosen: list[int] = []
        for _ in range(rng.randint(2, 5)):
            k = _pick(rng, _cumulative(sc.APPS[i].weight for i in pool))
            chosen.append(pool.pop(k))
        if rng.random() < (0.35 if tablet else 0.10):
            kids = self.kids_apps
            chosen.append(kids[_pick(rng, _cumulative(sc.APPS[i].weight for i in kids))])
        return chosen

    def _slot_mix(self, app: sc.App, device: sc.Device) -> tuple[list[sc.Size], list[float]]:
        key = (app.category, device.dip_width >= sc.LEADERBOARD[0])
        mix = self.slot_mixes.get(key)
        if mix is None:
            pairs = sc.slot_mix(app.category, device.dip_width)
            mix = ([s for s, _ in pairs], _cumulative(w for _, w in pairs))
            self.slot_mixes[key] = mix
        return mix

    def _eligible(self, size: sc.Size, country: str, os: str, coppa: bool) -> _Bidders:
        """Campaigns with a creative of exactly this size that may bid here, with weights."""
        key = (size, country, os, coppa)
        found = self.eligible.get(key)
        if found is None:
            camps = [
                (c, c.creatives_of(size))
                for c in sc.CAMPAIGNS
                if c.creatives_of(size)
                and (c.countries is None or country in c.countries)
                and (c.os is None or c.os == os)
                and (c.kids_ok or not coppa)
            ]
            found = (camps, _cumulative(c.weight for c, _ in camps))
            self.eligible[key] = found
        return found

    # -- time --------------------------------------------------------------------

    def _offset(self, tz: str, t_ms: int) -> int:
        """UTC offset in minutes at ``t_ms``; cached per quarter hour, when DST can change."""
        key = (tz, t_ms // 900_000)
        off = self.offsets.get(key)
        if off is None:
            zone = self.zones.get(tz)
            if zone is None:
                zone = self.zones[tz] = ZoneInfo(tz)
            delta = (_EPOCH + timedelta(milliseconds=t_ms)).astimezone(zone).utcoffset()
            off = self.offsets[key] = int(delta.total_seconds() // 60) if delta else 0
        return off

    def _ts(self, t_ms: int, off: int) -> float | str:
        """Event time as SDKs send it: mostly epoch seconds, sometimes local RFC 3339."""
        if self.rng.random() >= RFC3339_SHARE:
            return t_ms / 1000
        return self._rfc3339(t_ms, off)

    def _rfc3339(self, t_ms: int, off: int) -> str:
        zone = self.fixed_zones.get(off)
        if zone is None:
            zone = self.fixed_zones[off] = timezone(timedelta(minutes=off))
        local = (_EPOCH + timedelta(milliseconds=t_ms)).astimezone(zone)
        return local.isoformat(timespec="milliseconds")

    @staticmethod
    def _local_hour(t_ms: int, off: int) -> int:
        return (t_ms // 60_000 + off) // 60 % 24

    # -- traffic -----------------------------------------------------------------

    def _session_starts(self, user: _User, count: int) -> list[int]:
        """Session start times drawn from the traffic curve of the user's local hour."""
        rng = self.rng
        span = self.end_ms - self.start_ms
        curve = sc.TRAFFIC_BY_LOCAL_HOUR
        starts: list[int] = []
        while len(starts) < count:
            t = self.start_ms + int(rng.random() * span)
            if rng.random() < curve[self._local_hour(t, self._offset(user.tz, t))]:
                starts.append(t)
        starts.sort()
        return starts

    def _user_traffic(self, user: _User, target: int) -> None:
        """Sessions of a few to a few dozen requests until the user has made ``target``."""
        rng = self.rng
        lengths: list[int] = []
        total = 0
        while total < target:
            n = min(max(round(rng.lognormvariate(math.log(6.0), 0.7)), 2), 40, target - total)
            lengths.append(n)
            total += n
        last = -SESSION_GAP_MIN_MS
        for start, length in zip(self._session_starts(user, len(lengths)), lengths, strict=True):
            t = max(start, last + SESSION_GAP_MIN_MS + int(rng.random() * 600_000))
            if t >= self.end_ms:
                break
            mix_index = _pick(rng, user.app_cum)
            for _ in range(length):
                self._auction(user, mix_index, t)
                last = t
                gap = min(max(math.exp(rng.gauss(_LOG_20, 0.9)), 2.0), 240.0)
                t += int(gap * 1000)
                if t >= self.end_ms:
                    break

    def _emit(self, kind: int, t_ms: int, meta: int, event: dict[str, Any]) -> None:
        """Queue one line with its arrival time: a few ms after ``t_ms``, or minutes if late."""
        rng = self.rng
        if kind in (WIN, CLICK) and rng.random() < LATE_SHARE:
            arrival = t_ms + 60_000 + int(rng.random() * 180_000)
        else:
            arrival = t_ms + int(rng.random() * 40)
        self.arrivals.append(arrival)
        self.kinds.append(kind)
        self.auction_of.append(len(self.auction_sizes) - 1)
        self.meta.append(meta)
        # orjson hands back a bytes object with a 4 KiB buffer behind it; a compact
        # copy keeps a million-line log near 400 MB instead of 4 GB.
        self.lines.append(memoryview(orjson.dumps(event)).tobytes())
        self.auction_sizes[-1] += 1

    def _auction(self, user: _User, mix_index: int, t: int) -> None:
        """One bid request and whatever follows it: our bid, the win, impression, click."""
        rng = self.rng
        app_index = user.apps[mix_index]
        app = sc.APPS[app_index]
        device = user.device
        off = self.offsets.get((user.tz, t // 900_000))
        if off is None:
            off = self._offset(user.tz, t)
        sizes, size_cum = user.app_slots[mix_index]
        size = sizes[bisect(size_cum, rng.random() * size_cum[-1])]
        aid = f"{rng.getrandbits(64):016x}"
        coppa = app.coppa

        r = rng.random()
        if r < 0.50:
            geo = {"country": user.country.code, "lat": user.lat, "lon": user.lon, "utcoffset": off}
        else:
            geo = user.geo_without_offset[0 if r < 0.90 else 1 if r < 0.95 else 2]
        self.auction_sizes.append(0)
        self._emit(
            REQUEST,
            t,
            user.index * len(sc.APPS) + app_index,
            {
                "kind": "request",
                "ts": t / 1000 if rng.random() >= RFC3339_SHARE else self._rfc3339(t, off),
                "id": aid,
                "user": user.id,
                "app": app.bundle,
                "device": user.device_json,
                "geo": geo,
                "slot": _SLOT_JSON[size],
                "coppa": 1 if coppa else 0,
            },
        )

        if rng.random() >= (BID_SHARE_LMT if user.lmt else BID_SHARE):
            return
        camps, camp_cum = self._eligible(size, user.country.code, device.os, coppa)
        if not camps:
            return
        campaign, creatives = camps[_pick(rng, camp_cum)]
        creative = creatives[int(rng.random() * len(creatives))]
        restricted: dict[str, Any] = {}
        if user.lmt:
            restricted["device"] = {"lmt": 1}
        if coppa:
            restricted["coppa"] = 1
        price = (
            campaign.base_cpm
            * user.country.price_factor
            * sc.PRICE_BY_SLOT[size]
            * math.exp(rng.gauss(0.0, 0.3))
            * (0.6 if user.lmt else 1.0)
            * (0.75 if coppa else 1.0)
        )
        price = max(round(price, 3), 0.01)
        t_bid = t + 8 + int(rng.random() * 82)
        if t_bid >= self.end_ms:
            return
        self._emit(
            BID,
            t_bid,
            -1,
            {
                "kind": "bid",
                "ts": self._ts(t_bid, off),
                "id": aid,
                "user": user.id,
                "app": app.bundle,
                "campaign": campaign.id,
                "creative": creative.id,
                "price": price,
                "slot": _SLOT_JSON[size],
                **restricted,
            },
        )

        hour = self._local_hour(t, off)
        fraction = user.screen_fraction[size]
        if rng.random() >= sc.win_probability(size, fraction, hour):
            return
        t_win = t_bid + 40 + int(rng.random() * 310)
        if t_win >= self.end_ms:
            return
        clearing = min(round(price * rng.uniform(0.45, 0.98), 3), price)
        self._emit(
            WIN,
            t_win,
            -1,
            {
                "kind": "win",
                "ts": self._ts(t_win, off),
                "id": aid,
                "user": user.id,
                "app": app.bundle,
                "campaign": campaign.id,
                "creative": creative.id,
                "price": clearing,
                **restricted,
            },
        )

        if rng.random() >= IMPRESSION_SHARE:
            return
        t_imp = t_win + 500 + int(rng.random() * 4500)
        if t_imp >= self.end_ms:
            return
        seen = {
            "id": aid,
            "user": user.id,
            "app": app.bundle,
            "campaign": campaign.id,
            "creative": creative.id,
            **restricted,
        }
        self._emit(
            IMPRESSION,
            t_imp,
            -1,
            {"kind": "impression", "ts": self._ts(t_imp, off), **seen},
        )

        if rng.random() >= sc.click_probability(size, fraction, hour):
            return
        t_click = t_imp + int(sc.click_delay(rng) * 1000)
        if t_click >= self.end_ms:
            return
        off_click = self._offset(user.tz, t_click)
        self._emit(
            CLICK,
            t_click,
            -1,
            {"kind": "click", "ts": self._ts(t_click, off_click), **seen},
        )

    # -- shaping the log ---------------------------------------------------------

    def _thin(self) -> list[int]:
        """Drop whole auctions at random until exactly ``events`` lines are left."""
        rng = self.rng
        sizes = self.auction_sizes
        excess = len(self.lines) - self.events
        dropped = bytearray(len(sizes))
        tries = 0
        while excess > 0 and tries < 100 * len(sizes):
            tries += 1
            a = rng.randrange(len(sizes))
            if not dropped[a] and 0 < sizes[a] <= excess:
                dropped[a] = 1
                excess -= sizes[a]
        auction_of = self.auction_of
        return [i for i in range(len(self.lines)) if not dropped[auction_of[i]]]

    def _malform(self, kept: list[int]) -> int:
        """Break about one line in 5,000, cycling through every kind of breakage.

        A broken line replaces a real one, as a corrupted write would, so the
        auction it belonged to is left with a stage missing.
        """
        rng = self.rng
        n = len(kept)
        count = max(round(n / MALFORMED_EVERY), min(2 * len(MALFORMATIONS), n // 1000))
        by_kind: dict[int, list[int]] = {k: [] for k in range(5)}
        for i in kept:
            by_kind[self.kinds[i]].append(i)
        used: set[int] = set()
        first = rng.randrange(len(MALFORMATIONS))
        done = 0
        for j in range(count):
            how = MALFORMATIONS[(first + j) % len(MALFORMATIONS)]
            if how == "negative_price":
                pool = by_kind[BID]
            elif how == "non_numeric_size":
                pool = by_kind[BID] if rng.random() < 0.2 else by_kind[REQUEST]
            else:
                pool = kept
            if not pool:
                continue
            free = [i for i in (pool[rng.randrange(len(pool))] for _ in range(20)) if i not in used]
            if not free:
                continue
            i = free[0]
            used.add(i)
            self.lines[i] = self._broken(self.lines[i], how)
            self.meta[i] = -1
            done += 1
        return done

    def _broken(self, line: bytes, how: str) -> bytes:
        rng = self.rng
        if how == "truncated":
            return line[: rng.randrange(8, len(line) - 2)]
        event = orjson.loads(line)
        if how == "unknown_kind":
            event["kind"] = _MISSPELT_KIND[event["kind"]]
        elif how == "missing_ts":
            del event["ts"]
        elif how == "bad_ts":
            event["ts"] = rng.choice(_BAD_TS)
        elif how == "negative_price":
            event["price"] = -(event["price"] or 0.5)
        elif event["kind"] == "request" and rng.random() < 0.5:
            event["device"] = {**event["device"], "w": "wide"}
        else:
            event["slot"] = {**event["slot"], "w": "wide"}
        return orjson.dumps(event)

    def _lookups(self, valid_requests: list[int]) -> list[dict[str, Any]]:
        """Lookups for user/app pairs seen in the log, asked at the end of the period.

        A couple are for lmt devices and kids' apps, so that a demo shows the
        engine honouring them.
        """
        rng = self.rng
        n_apps = len(sc.APPS)
        pairs = list(dict.fromkeys(valid_requests))
        if not pairs:
            return []
        want = min(len(pairs), max(20, min(100, len(pairs) // 25)))
        lmt = [p for p in pairs if self.users[p // n_apps].lmt]
        kids = [p for p in pairs if sc.APPS[p % n_apps].coppa]
        picked = list(dict.fromkeys(lmt[:2] + kids[:2]))
        taken = set(picked)
        rest = [p for p in pairs if p not in taken]
        picked += rng.sample(rest, min(len(rest), want - len(picked)))
        rng.shuffle(picked)
        return [self._lookup(p // n_apps, p % n_apps) for p in picked]

    def _lookup(self, user_index: int, app_index: int) -> dict[str, Any]:
        rng = self.rng
        user = self.users[user_index]
        app = sc.APPS[app_index]
        sizes, cum = self._slot_mix(app, user.device)
        size = sizes[_pick(rng, cum)]
        camps, _ = self._eligible(size, user.country.code, user.device.os, app.coppa)
        ids = [c.id for c, _ in camps]
        chosen = rng.sample(ids, 3) if len(ids) >= 3 else ids
        chosen += [c.id for c in sc.CAMPAIGNS if c.id not in chosen][: 3 - len(chosen)]
        return {
            "user": user.id,
            "app": app.bundle,
            "ts": self.end_ms / 1000,
            "device": user.device_json,
            "geo": {
                "country": user.country.code,
                "lat": user.lat,
                "lon": user.lon,
                "utcoffset": self._offset(user.tz, self.end_ms),
            },
            "slot": _SLOT_JSON[size],
            "coppa": 1 if app.coppa else 0,
            "campaigns": chosen,
        }


def build_log(
    seed: int,
    events: int,
    end_ts: float,
    *,
    hours: float = 24.0,
    users: int | None = None,
) -> DemoLog:
    """Build the whole log of ``events`` lines for the ``hours`` before ``end_ts``.

    ``users`` is how many users to draw; by default about one per 40 events a day.
    Very small or very short logs may draw a few more users to reach the count.
    """
    if events < 0:
        raise ValueError("events must be 0 or more")
    if hours <= 0:
        raise ValueError("hours must be more than 0")
    if users is not None and users < 1:
        raise ValueError("users must be 1 or more")
    # Millions of short-lived dicts would set off the cycle collector thousands of
    # times for nothing (up to a quarter of the run time): none of them forms a cycle.
    collecting = gc.isenabled()
    gc.disable()
    try:
        return _LogBuilder(seed, events, end_ts, hours, users).build()
    finally:
        if collecting:
            gc.enable()


def generate(
    seed: int,
    events: int,
    end_ts: float,
    *,
    hours: float = 24.0,
    users: int | None = None,
) -> Iterator[str]:
    """The log's lines (without newline) in arrival order; see :func:`build_log`."""
    log = build_log(seed, events, end_ts, hours=hours, users=users)
    return (line.decode() for line in log.lines)


def write_lines(lines: Sequence[bytes], path: str) -> None:
    """Write newline-terminated lines to ``path`` ("-" is stdout), gzipped for ``.gz``.

    The gzip header carries no name or time, so the file's bytes depend only on
    the lines.
    """
    if path == "-":
        _write_chunks(lines, sys.stdout.buffer)
        sys.stdout.buffer.flush()
        return
    Path(path).parent.mkdir(parents=True, exist_ok=True)
    with open(path, "wb") as raw:
        if path.endswith(".gz"):
            with gzip.GzipFile(
                filename="", mode="wb", fileobj=raw, compresslevel=3, mtime=0
            ) as packed:
                _write_chunks(lines, packed)
        else:
            _write_chunks(lines, raw)


def _write_chunks(lines: Sequence[bytes], out: _Writable) -> None:
    step = 20_000
    for k in range(0, len(lines), step):
        out.write(b"\n".join(lines[k : k + step]) + b"\n")


def _parse_end(text: str) -> float:
    try:
        seconds = float(text)
    except ValueError:
        pass
    else:
        if not math.isfinite(seconds):
            raise ValueError(text)
        return seconds
    moment = datetime.fromisoformat(text)
    if moment.tzinfo is None:
        moment = moment.replace(tzinfo=UTC)
    return moment.timestamp()


def _iso(ts: float) -> str:
    return datetime.fromtimestamp(ts, UTC).strftime("%Y-%m-%dT%H:%M:%SZ")


def _parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="python -m windvane_demo.generate",
        description="Write a reproducible demo bidding log (JSON Lines) of an invented ad network.",
    )
    parser.add_argument("--seed", type=int, default=7, help="random seed (default 7)")
    parser.add_argument("--events", type=int, default=200_000, help="log lines to write")
    parser.add_argument(
        "--end",
        help="end of the period, RFC 3339 or epoch seconds (default: this hour, UTC)",
    )
    parser.add_argument("--hours", type=float, default=24.0, help="length of the period")
    parser.add_argument("--users", type=int, help="users to draw (default: from --events)")
    parser.add_argument("--out", default="-", help="log file; .gz is gzipped; - is stdout")
    parser.add_argument("--lookups-out", help="also write lookup requests (JSON Lines) here")
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    """Command line: write the log (and lookups), then one summary line on stderr."""
    parser = _parser()
    args = parser.parse_args(argv)
    if args.end is None:
        end_ts = float(int(time.time()) // 3600 * 3600)
    else:
        try:
            end_ts = _parse_end(args.end)
        except ValueError:
            parser.error(f"--end {args.end!r} is neither RFC 3339 nor epoch seconds")
    try:
        log = build_log(args.seed, args.events, end_ts, hours=args.hours, users=args.users)
    except ValueError as err:
        parser.error(str(err))
    try:
        write_lines(log.lines, args.out)
    except BrokenPipeError:
        # The reader (say ``| head``) has had enough; that is not an error here.
        os.dup2(os.open(os.devnull, os.O_WRONLY), sys.stdout.fileno())
        return 0
    lookups = ""
    if args.lookups_out:
        write_lines([orjson.dumps(x) for x in log.lookups], args.lookups_out)
        lookups = f"; {len(log.lookups)} lookups to {args.lookups_out}"
    sys.stderr.write(
        f"windvane-demo: wrote {len(log.lines)} events ({log.malformed} malformed) "
        f"for {log.users} users on {log.apps} apps, {_iso(log.start_ts)} .. {_iso(log.end_ts)}, "
        f"to {args.out}{lookups}\n"
    )
    return 0


if __name__ == "__main__":
    sys.exit(main())
