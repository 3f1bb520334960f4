"""The demo log has to look like a bidder's real event pipe, or the demo proves nothing.

These tests check the properties the engine's demo and benchmarks rely on: a
reproducible log, the event format, realistic rates and delays, and the awkward
parts (late, malformed and restricted events) present in the right amounts.
"""

from __future__ import annotations

import gzip
import hashlib
import itertools
import os
import re
import statistics
import subprocess
import sys
import time
from collections import Counter, defaultdict
from datetime import datetime
from pathlib import Path
from random import Random
from typing import Any

import orjson
import pytest

from windvane_demo import scenario
from windvane_demo.generate import DemoLog, build_log, generate, main

END = 1796126400.0  # 2026-12-01T12:00:00Z
START = END - 24 * 3600
EVENTS = 40_000
SEED = 11

KINDS = ("request", "bid", "win", "impression", "click")
RFC3339 = re.compile(r"^\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}(\.\d+)?(Z|[+-]\d{2}:\d{2})$")
HEX_USER = re.compile(r"^[0-9a-f]{16,32}$")
BUNDLES = {a.bundle for a in scenario.APPS}
KIDS_BUNDLES = {a.bundle for a in scenario.APPS if a.coppa}
CAMPAIGNS = {c.id: c for c in scenario.CAMPAIGNS}
COUNTRIES = {c.code for c in scenario.COUNTRIES}
MODELS = {d.model for d in scenario.load_devices()}
SLOT_SIZES = set(scenario.SLOT_SIZES)


def parse_ts(value: Any) -> float | None:
    """Epoch seconds of an event time, or None when it is not one of the two formats."""
    if isinstance(value, bool):
        return None
    if isinstance(value, int | float):
        return float(value)
    if isinstance(value, str) and RFC3339.match(value):
        try:
            return datetime.fromisoformat(value).timestamp()
        except ValueError:
            return None
    return None


def malformation(line: bytes) -> str | None:
    """Which kind of broken line this is, or None for a line an engine should accept."""
    try:
        event = orjson.loads(line)
    except orjson.JSONDecodeError:
        return "truncated"
    if event.get("kind") not in KINDS:
        return "unknown_kind"
    if "ts" not in event:
        return "missing_ts"
    if parse_ts(event["ts"]) is None:
        return "bad_ts"
    price = event.get("price")
    if isinstance(price, int | float) and price < 0:
        return "negative_price"
    for part in ("slot", "device"):
        sizes = event.get(part) or {}
        if any(k in sizes and not isinstance(sizes[k], int | float) for k in ("w", "h")):
            return "non_numeric_size"
    return None


def check_event(e: dict[str, Any]) -> None:
    """Assert that a valid line follows the documented event format, field by field."""
    kind = e["kind"]
    common = {"kind", "ts", "id"}
    allowed = {
        "request": common | {"user", "app", "device", "geo", "slot", "coppa"},
        "bid": common | {"user", "app", "campaign", "creative", "price", "slot", "device", "coppa"},
        "win": common | {"user", "app", "campaign", "creative", "price", "device", "coppa"},
        "impression": common | {"user", "app", "campaign", "creative", "device", "coppa"},
        "click": common | {"user", "app", "campaign", "creative", "device", "coppa"},
    }[kind]
    assert set(e) <= allowed, e
    assert isinstance(e["id"], str)
    assert re.fullmatch(r"[0-9a-f]{16}", e["id"])
    ts = parse_ts(e["ts"])
    assert ts is not None
    assert START <= ts < END, e
    if isinstance(e["ts"], float | int):
        assert round(e["ts"], 3) == e["ts"]
    if kind in ("request", "impression", "click"):
        assert HEX_USER.match(e["user"])
        assert e["app"] in BUNDLES
    if kind != "request":
        campaign = CAMPAIGNS[e["campaign"]]
        assert e["creative"] in {c.id for c in campaign.creatives}
        assert e.get("device", {"lmt": 1}) == {"lmt": 1}
        assert e.get("coppa", 1) == 1
    if kind in ("bid", "win"):
        assert isinstance(e["price"], int | float)
        assert e["price"] >= 0
    if kind == "bid":
        creative = next(c for c in campaign.creatives if c.id == e["creative"])
        assert (creative.w, creative.h) == (e["slot"]["w"], e["slot"]["h"])
    if kind == "request":
        device = e["device"]
        assert set(device) == {"ua", "model", "os", "w", "h", "pxratio", "lmt"}
        assert device["model"] in MODELS
        assert device["model"] in device["ua"]
        assert device["os"] in ("android", "ios")
        assert isinstance(device["w"], int)
        assert isinstance(device["h"], int)
        assert device["w"] < device["h"]
        assert 1.0 <= device["pxratio"] <= 4.0
        assert device["lmt"] in (0, 1)
        geo = e["geo"]
        assert geo
        assert set(geo) <= {"country", "lat", "lon", "utcoffset"}
        assert ("lat" in geo) == ("lon" in geo)
        if "country" in geo:
            assert geo["country"] in COUNTRIES
        if "lat" in geo:
            assert -90 <= geo["lat"] <= 90
            assert -180 <= geo["lon"] <= 180
        if "utcoffset" in geo:
            assert isinstance(geo["utcoffset"], int)
            assert -720 <= geo["utcoffset"] <= 840
        slot = (e["slot"]["w"], e["slot"]["h"])
        assert slot in SLOT_SIZES
        assert slot[0] <= device["w"] / device["pxratio"] + 0.5
        assert e["coppa"] == (1 if e["app"] in KIDS_BUNDLES else 0)


@pytest.fixture(scope="module")
def log() -> DemoLog:
    return build_log(SEED, EVENTS, END)


@pytest.fixture(scope="module")
def events(log: DemoLog) -> list[dict[str, Any]]:
    """The valid events in log order, with their parsed time under ``_t``."""
    out = []
    for line in log.lines:
        if malformation(line) is None:
            event = orjson.loads(line)
            event["_t"] = parse_ts(event["ts"])
            out.append(event)
    return out


@pytest.fixture(scope="module")
def by_kind(events: list[dict[str, Any]]) -> dict[str, dict[str, dict[str, Any]]]:
    """Valid events by kind, then by auction id."""
    found: dict[str, dict[str, dict[str, Any]]] = {k: {} for k in KINDS}
    for e in events:
        assert e["id"] not in found[e["kind"]], "an auction id repeats within one kind"
        found[e["kind"]][e["id"]] = e
    return found


def test_same_seed_gives_identical_lines_and_other_seed_does_not(log: DemoLog) -> None:
    again = build_log(SEED, EVENTS, END)
    assert again.lines == log.lines
    assert again.lookups == log.lookups
    other = build_log(SEED + 1, EVENTS, END)
    assert other.lines != log.lines
    assert len(set(other.lines[:1000]) & set(log.lines[:1000])) == 0


def test_output_does_not_depend_on_string_hashing(tmp_path: Path) -> None:
    digests = set()
    for hash_seed in ("1", "2"):
        out = tmp_path / f"h{hash_seed}.jsonl"
        subprocess.run(
            [
                sys.executable,
                *("-m", "windvane_demo.generate", "--seed", "3", "--events", "3000"),
                *("--end", "2026-12-01T12:00:00Z", "--out", str(out)),
            ],
            check=True,
            capture_output=True,
            env={**os.environ, "PYTHONHASHSEED": hash_seed},
        )
        digests.add(hashlib.sha256(out.read_bytes()).hexdigest())
    assert len(digests) == 1


def test_writes_exactly_the_requested_number_of_lines(log: DemoLog) -> None:
    assert len(log.lines) == EVENTS
    assert len(build_log(5, 1234, END).lines) == 1234


def test_every_event_kind_is_present(by_kind: dict[str, dict[str, dict[str, Any]]]) -> None:
    counts = {k: len(v) for k, v in by_kind.items()}
    assert all(counts[k] > 0 for k in KINDS), counts
    assert counts["request"] > counts["bid"] > counts["win"] > counts["impression"]
    assert counts["impression"] > counts["click"]


def test_bidder_bids_on_about_half_the_requests(
    by_kind: dict[str, dict[str, dict[str, Any]]],
) -> None:
    assert 0.40 <= len(by_kind["bid"]) / len(by_kind["request"]) <= 0.60


def test_malformed_lines_are_rare_and_of_every_kind(log: DemoLog) -> None:
    found = Counter(m for m in map(malformation, log.lines) if m is not None)
    assert set(found) == {
        "truncated",
        "unknown_kind",
        "missing_ts",
        "bad_ts",
        "negative_price",
        "non_numeric_size",
    }
    total = sum(found.values())
    assert total == log.malformed
    assert 6 <= total <= EVENTS / 1000
    assert build_log(2, 1_000_000 // 40, END).malformed >= 6


def test_malformed_lines_are_spread_through_the_log(log: DemoLog) -> None:
    positions = [i for i, line in enumerate(log.lines) if malformation(line) is not None]
    assert positions[0] < EVENTS // 2 < positions[-1]


def test_every_valid_line_follows_the_event_format(events: list[dict[str, Any]]) -> None:
    assert len(events) > EVENTS * 0.99
    for e in events:
        check_event({k: v for k, v in e.items() if k != "_t"})


def test_win_rate_and_ctr_are_in_the_trade_range(
    by_kind: dict[str, dict[str, dict[str, Any]]],
) -> None:
    win_rate = len(by_kind["win"]) / len(by_kind["bid"])
    ctr = len(by_kind["click"]) / len(by_kind["impression"])
    assert 0.10 <= win_rate <= 0.30
    assert 0.002 <= ctr <= 0.02
    assert 0.90 <= len(by_kind["impression"]) / len(by_kind["win"]) <= 0.99


def test_win_rate_differs_by_slot_size(by_kind: dict[str, dict[str, dict[str, Any]]]) -> None:
    bids: Counter[tuple[int, int]] = Counter()
    wins: Counter[tuple[int, int]] = Counter()
    for aid, bid in by_kind["bid"].items():
        size = (bid["slot"]["w"], bid["slot"]["h"])
        bids[size] += 1
        wins[size] += aid in by_kind["win"]
    rate = {size: wins[size] / bids[size] for size in bids}
    assert rate[scenario.INTERSTITIAL] > rate[scenario.BANNER] * 1.1


def test_stages_follow_each_other_in_time_and_price(
    by_kind: dict[str, dict[str, dict[str, Any]]],
) -> None:
    requests, bids, wins = by_kind["request"], by_kind["bid"], by_kind["win"]
    impressions, clicks = by_kind["impression"], by_kind["click"]
    orphans = sum(aid not in bids for aid in wins) + sum(aid not in requests for aid in bids)
    orphans += sum(aid not in wins for aid in impressions)
    orphans += sum(aid not in impressions for aid in clicks)
    assert orphans <= 12  # only where a malformed line replaced the earlier stage
    for aid, bid in bids.items():
        if aid in requests:
            assert 0 < bid["_t"] - requests[aid]["_t"] < 0.1
            assert bid["slot"] == requests[aid]["slot"]
    for aid, win in wins.items():
        if aid in bids:
            assert win["price"] <= bids[aid]["price"]
            assert win["campaign"] == bids[aid]["campaign"]
            assert win["creative"] == bids[aid]["creative"]
    for aid, imp in impressions.items():
        if aid in wins:
            assert 0.5 <= imp["_t"] - wins[aid]["_t"] <= 5.0
            assert imp["creative"] == wins[aid]["creative"]
        if aid in requests:
            assert imp["user"] == requests[aid]["user"]
            assert imp["app"] == requests[aid]["app"]
    for aid, click in clicks.items():
        if aid in impressions:
            assert click["creative"] == impressions[aid]["creative"]


def test_every_stage_carries_the_requests_user_and_app(
    by_kind: dict[str, dict[str, dict[str, Any]]],
) -> None:
    # Per-user and per-app state is keyed by the event's own user and app fields, so a
    # bid, win, impression or click must repeat them from its request.
    requests = by_kind["request"]
    checked = 0
    for kind in ("bid", "win", "impression", "click"):
        for aid, stage in by_kind[kind].items():
            if aid in requests:
                assert (stage["user"], stage["app"]) == (
                    requests[aid]["user"],
                    requests[aid]["app"],
                )
                checked += 1
    assert checked > 1000


def test_click_delays_are_heavy_tailed_within_twelve_hours(
    by_kind: dict[str, dict[str, dict[str, Any]]],
) -> None:
    impressions = by_kind["impression"]
    delays = [
        click["_t"] - impressions[aid]["_t"]
        for aid, click in by_kind["click"].items()
        if aid in impressions
    ]
    assert len(delays) >= 10
    assert all(1.0 <= d <= 12 * 3600 for d in delays), sorted(delays)
    assert statistics.median(delays) < 120
    assert max(delays) > 5 * statistics.median(delays)


def test_click_delay_has_a_long_tail_capped_at_twelve_hours() -> None:
    rng = Random(0)
    delays = [scenario.click_delay(rng) for _ in range(20_000)]
    assert min(delays) >= 1.0
    assert max(delays) == 12 * 3600
    assert statistics.median(delays) < 30
    assert 0.005 <= sum(d > 3600 for d in delays) / len(delays) <= 0.05


def test_some_wins_and_clicks_arrive_minutes_late(events: list[dict[str, Any]]) -> None:
    behind: Counter[str] = Counter()
    minutes_behind = 0
    newest = float("-inf")
    for e in events:
        lag = newest - e["_t"]
        if lag > 1.0:  # beyond the arrival jitter; less than a minute only at the log's end
            behind[e["kind"]] += 1
            minutes_behind += lag > 60
            assert lag < 240.1
        newest = max(newest, e["_t"])
    assert set(behind) <= {"win", "click"}
    assert minutes_behind > 0
    wins_and_clicks = sum(e["kind"] in ("win", "click") for e in events)
    assert 0.001 <= sum(behind.values()) / wins_and_clicks <= 0.02


def test_restricted_users_and_apps_are_flagged_on_every_stage(
    by_kind: dict[str, dict[str, dict[str, Any]]],
) -> None:
    requests = by_kind["request"]
    lmt_ids = {aid for aid, r in requests.items() if r["device"]["lmt"] == 1}
    coppa_ids = {aid for aid, r in requests.items() if r["coppa"] == 1}
    assert lmt_ids
    assert coppa_ids
    assert {requests[aid]["app"] for aid in coppa_ids} <= KIDS_BUNDLES
    users = {r["user"]: r["device"]["lmt"] for r in requests.values()}
    assert 0.03 <= sum(users.values()) / len(users) <= 0.12
    restricted_later_stages = 0
    for kind in ("bid", "win", "impression", "click"):
        for aid, e in by_kind[kind].items():
            if aid not in requests:
                continue
            assert ("device" in e) == (aid in lmt_ids)
            assert ("coppa" in e) == (aid in coppa_ids)
            restricted_later_stages += aid in lmt_ids or aid in coppa_ids
    assert restricted_later_stages > 0


def test_users_span_many_utc_offsets(by_kind: dict[str, dict[str, dict[str, Any]]]) -> None:
    offsets = {
        r["geo"]["utcoffset"] for r in by_kind["request"].values() if "utcoffset" in r["geo"]
    }
    assert len(offsets) >= 5
    assert any(off % 60 for off in offsets)  # India's +05:30 at least
    assert min(offsets) <= -300
    assert max(offsets) >= 540


def test_timestamps_mix_epoch_and_local_rfc3339(events: list[dict[str, Any]]) -> None:
    strings = [e for e in events if isinstance(e["ts"], str)]
    assert 0.02 <= len(strings) / len(events) <= 0.08
    checked = 0
    for e in strings:
        if e["kind"] == "request" and "utcoffset" in e["geo"]:
            local = datetime.fromisoformat(e["ts"])
            offset = local.utcoffset()
            assert offset is not None
            assert offset.total_seconds() / 60 == e["geo"]["utcoffset"]
            checked += 1
    assert checked > 0


def test_geo_comes_in_every_shape(by_kind: dict[str, dict[str, dict[str, Any]]]) -> None:
    shapes = Counter(tuple(sorted(r["geo"])) for r in by_kind["request"].values())
    total = sum(shapes.values())
    with_offset = sum(n for shape, n in shapes.items() if "utcoffset" in shape)
    assert 0.40 <= with_offset / total <= 0.60
    assert shapes[("lat", "lon")] > 0
    assert shapes[("country",)] > 0
    assert shapes[("country", "lat", "lon")] > 0


def test_traffic_follows_the_users_local_day(
    by_kind: dict[str, dict[str, dict[str, Any]]],
) -> None:
    by_hour: Counter[int] = Counter()
    for r in by_kind["request"].values():
        if "utcoffset" in r["geo"]:
            by_hour[int((r["_t"] / 60 + r["geo"]["utcoffset"]) // 60 % 24)] += 1
    evening = sum(by_hour[h] for h in (19, 20, 21))
    night = sum(by_hour[h] for h in (2, 3, 4))
    assert evening > 4 * night


def test_requests_come_in_sessions(by_kind: dict[str, dict[str, dict[str, Any]]]) -> None:
    times: dict[str, list[float]] = defaultdict(list)
    for r in by_kind["request"].values():
        times[r["user"]].append(r["_t"])
    gaps = []
    sessions = 0
    for ts in times.values():
        ts.sort()
        user_gaps = [b - a for a, b in itertools.pairwise(ts)]
        gaps += user_gaps
        sessions += 1 + sum(g > 1800 for g in user_gaps)
    assert sum(g > 1800 for g in gaps) > 0
    assert sum(600 < g <= 1800 for g in gaps) / len(gaps) < 0.005
    assert 2.0 <= sessions / len(times) <= 6.0
    assert 4 <= sum(len(ts) for ts in times.values()) / sessions <= 15


def test_device_table_uses_physical_pixels() -> None:
    devices = scenario.load_devices()
    assert 20 <= len(devices) <= 40
    assert len({d.model for d in devices}) == len(devices)
    for d in devices:
        dip_w = d.w / d.pxratio
        assert d.w < d.h
        if d.tablet:
            assert 600 <= dip_w <= 1024, d
        else:
            assert 320 <= dip_w <= 430, d
    assert any(d.tablet for d in devices)
    assert {d.os for d in devices} == {"android", "ios"}


def test_lookups_name_users_and_apps_from_the_log(
    log: DemoLog, by_kind: dict[str, dict[str, dict[str, Any]]]
) -> None:
    seen = {(r["user"], r["app"]) for r in by_kind["request"].values()}
    assert 20 <= len(log.lookups) <= 100
    for lookup in log.lookups:
        assert set(lookup) == {"user", "app", "ts", "device", "geo", "slot", "campaigns", "coppa"}
        assert (lookup["user"], lookup["app"]) in seen
        assert lookup["ts"] == END
        assert len(set(lookup["campaigns"])) == 3
        assert set(lookup["campaigns"]) <= set(CAMPAIGNS)
        assert (lookup["slot"]["w"], lookup["slot"]["h"]) in SLOT_SIZES
    assert any(x["device"]["lmt"] == 1 for x in log.lookups)
    assert any(x["coppa"] == 1 for x in log.lookups)


def test_cli_writes_reproducible_gzip_and_lookups(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    args = ["--seed", "4", "--events", "5000", "--end", "2026-12-01T12:00:00Z"]
    outputs = []
    for run in ("a", "b"):
        out, lookups = tmp_path / run / "demo.jsonl.gz", tmp_path / run / "lookups.jsonl"
        assert main([*args, "--out", str(out), "--lookups-out", str(lookups)]) == 0
        outputs.append((out.read_bytes(), lookups.read_bytes()))
    assert outputs[0] == outputs[1]
    text = gzip.decompress(outputs[0][0]).decode()
    assert text.endswith("\n")
    assert text.splitlines() == list(generate(4, 5000, END))
    assert len(outputs[0][1].splitlines()) >= 20
    summary = capsys.readouterr().err.strip().splitlines()[-1]
    assert "5000 events" in summary
    assert "2026-11-30T12:00:00Z .. 2026-12-01T12:00:00Z" in summary
    assert "malformed" in summary


def test_cli_ends_at_the_current_hour_by_default(tmp_path: Path) -> None:
    lookups = tmp_path / "lookups.jsonl"
    before = time.time()
    main(["--events", "2000", "--out", str(tmp_path / "log.jsonl"), "--lookups-out", str(lookups)])
    end = orjson.loads(lookups.read_bytes().splitlines()[0])["ts"]
    assert end % 3600 == 0
    assert before - 3600 <= end <= time.time()


def test_cli_rejects_an_unreadable_end(capsys: pytest.CaptureFixture[str]) -> None:
    with pytest.raises(SystemExit) as stopped:
        main(["--end", "next tuesday", "--out", "-"])
    assert stopped.value.code == 2
    assert "--end" in capsys.readouterr().err
