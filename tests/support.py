"""What the tests share: definition files, events, test data, waiting, and stored state.

Shared data lives here rather than in the test module that first used it, so that no
test module imports another and each can move or go on its own.
"""

from __future__ import annotations

import itertools
import math
import random
import textwrap
import time
from collections.abc import Callable
from pathlib import Path
from typing import Any

import orjson

from windvane.definitions.plan import load_plan
from windvane.engine import Engine
from windvane.ingest.rejects import RejectsFile
from windvane.ingest.replay import replay
from windvane.inputs.events import Event, parse_event
from windvane.store import open_store

_ids = itertools.count()

# The moment good_lines' events lead up to: fixed once per test session, so every caller
# replays the same events and lookups at one time see them all.
_LINES_NOW = round(time.time())


def good_lines(count: int, seed: int = 3) -> list[bytes]:
    """Valid event lines, one a second through the hour before ``_LINES_NOW``.

    Few users, apps and campaigns, so that keys gather many events; replay, CLI and
    service tests share them so each checks the same, known data.
    """
    rng = random.Random(seed)
    lines = []
    for n in range(count):
        kind = rng.choice(["request", "bid", "win", "impression", "click"])
        record = {
            "kind": kind,
            "ts": _LINES_NOW - 3600 + n,
            "id": f"auction-{n}",
            "user": f"user-{rng.randrange(20)}",
            "app": f"app-{rng.randrange(4)}",
            "campaign": f"camp-{rng.randrange(3)}",
            "slot": {"w": 320, "h": 50},
            "device": {"w": 1080, "h": 1920, "pxratio": 3, "lmt": 0},
        }
        if kind in ("bid", "win"):
            record["price"] = 1.25
        lines.append(orjson.dumps(record))
    return lines


# Each malformed line with the field its rejection must name.
BAD_LINES = [
    (b'{"kind": "request", "ts": 17', ""),  # truncated JSON
    (b'{"kind": "bidd", "ts": 1796000000, "id": "x"}', "kind"),
    (b'{"kind": "request", "id": "x", "user": "u"}', "ts"),
    (b'{"kind": "request", "ts": "yesterday", "id": "x"}', "ts"),
    (b'{"kind": "request", "ts": "2026-12-01T10:00:00", "id": "x"}', "ts"),  # no offset
    (b'{"kind": "bid", "ts": 1796000000, "id": "x", "app": "a", "price": -0.5}', "price"),
    (b'{"kind": "request", "ts": 1796000000, "id": "x", "slot": {"w": "wide", "h": 50}}', "slot.w"),
    (
        b'{"kind": "request", "ts": 1796000000, "id": "x", "device": {"w": 1080, "h": "tall"}}',
        "device.h",
    ),
    (b'{"kind": "request", "ts": 1796000000, "user": "u"}', "id"),
    (b'["kind", "request"]', ""),
    (b'{"kind": "request", "ts": 1796000000000, "id": "x"}', "ts"),  # milliseconds
    (b'{"kind": "click", "ts": 1796000000, "id": "x", "user": "a{b}"}', "user"),
]

# A valid model snapshot over the demo definitions, with a term of every shape.
GOOD_SNAPSHOT = {
    "version": "v1",
    "intercept": -3.0,
    "terms": [
        {"name": "ctr", "feature": "app_ctr", "transforms": ["log1p"], "weight": 20.0},
        {
            "name": "frac",
            "feature": "screen_fraction",
            "transforms": [{"clip": [0, 1]}, {"standardize": {"mean": 0.1, "scale": 0.2}}],
            "weight": 0.5,
            "default": 0.0,
        },
        {"name": "freq", "feature": "imps_1h", "weight": -0.2, "default": 0.0},
        {"name": "evening", "indicator": {"feature": "local_hour", "value": 21}, "weight": 0.3},
        {"name": "ctr_x_frac", "product": ["ctr", "frac"], "weight": 1.5, "default": -0.1},
    ],
}


def wait_until(check: Callable[[], bool], timeout_s: float, step_s: float = 0.02) -> bool:
    """Poll ``check`` until it holds or ``timeout_s`` has passed; the last try is after it.

    Waiting for the condition rather than sleeping a fixed time keeps fast machines fast
    and gives slow ones the whole timeout, and the final try means a condition that comes
    true right at the deadline still counts.
    """
    deadline = time.monotonic() + timeout_s
    while time.monotonic() < deadline:
        if check():
            return True
        time.sleep(step_s)
    return check()


def replay_good_lines(engine: Engine, directory: Path, count: int = 600) -> None:
    """Load ``good_lines(count)`` into the engine's store the way a replay of a log does."""
    log = directory / "good.jsonl"
    log.write_bytes(b"\n".join(good_lines(count)) + b"\n")
    with RejectsFile(directory / "good-rejects.jsonl") as rejects:
        replay(engine, [str(log)], rejects)


def write_defs(directory: Path, text: str, name: str = "features.toml") -> Path:
    directory.mkdir(parents=True, exist_ok=True)
    (directory / name).write_text(textwrap.dedent(text), encoding="utf-8")
    return directory


def engine_for(defs: Path, store_url: str) -> Engine:
    return Engine(load_plan(defs), open_store(store_url))


def event(kind: str, ts: float, **fields: Any) -> Event:
    """A validated event; the auction id is made up unless given."""
    fields.setdefault("id", f"auction-{next(_ids)}")
    return parse_event({"kind": kind, "ts": ts, **fields})


def dump_state(engine: Engine) -> dict[str, Any]:
    """Every key of the engine's generation with its content and expiry, for comparisons.

    Hashes are compared field by field; HyperLogLogs by their count, since their byte
    encoding (sparse or dense) is not part of windvane's contract.
    """
    store = engine.store
    state: dict[str, Any] = {}
    for key in sorted(store.scan_keys(engine.layout.pattern())):
        kind = store.key_type(key)
        if kind == "none":  # expired between SCAN and now
            continue
        if kind == "hash":
            content: Any = store.dump_hash(key)
        else:
            content = store.read([("PFCOUNT", key)])[0]
        state[key] = (kind if kind == "hash" else "hll", content, store.expire_at_ms(key))
    return state


def compare_generations(engine_a: Engine, engine_b: Engine) -> list[str]:
    """Differences between two generations of state, key by key and field by field.

    Stream watermarks (fields ``_w<shard>``) exist only under stream ingest and are left
    out, as are keys whose retention ends within two minutes (expiry is wall-clock time,
    so such a key can vanish between the two dumps). Decayed sums are compared to 1e-12
    relative: per app, events from different shards interleave differently than in the
    log, and floating-point addition is not associative; a double-counted or lost event
    would differ by far more.
    """
    decayed = {
        (key_shape.name, stored.field)
        for key_shape in engine_a.plan.key_shapes
        for stored in key_shape.states
        if stored.state.signature.startswith("decayed(")
    }
    a, b = _by_suffix(engine_a), _by_suffix(engine_b)
    # Keys whose retention ends around now are gone on one side and not yet on the other.
    soon_ms = time.time() * 1000 + 120_000
    for state in (a, b):
        for key in [k for k, (_, _, expire) in state.items() if 0 <= expire < soon_ms]:
            a.pop(key, None)
            b.pop(key, None)
    problems = [f"only in {engine_a.layout.generation}: {k}" for k in sorted(a.keys() - b.keys())]
    problems += [f"only in {engine_b.layout.generation}: {k}" for k in sorted(b.keys() - a.keys())]
    for key in sorted(a.keys() & b.keys()):
        (kind_a, value_a, expire_a), (kind_b, value_b, expire_b) = a[key], b[key]
        if expire_a != expire_b:
            problems.append(f"{key}: expiry {expire_a} != {expire_b}")
        if kind_a != "hash" or kind_b != "hash":
            if value_a != value_b:
                problems.append(f"{key}: {value_a!r} != {value_b!r}")
            continue
        fields_a = {f: v for f, v in value_a.items() if not f.startswith(b"_w")}
        fields_b = {f: v for f, v in value_b.items() if not f.startswith(b"_w")}
        key_shape = "user+campaign" if ":c:" in key else ("user" if "{u:" in key else "app")
        for field in sorted(fields_a.keys() | fields_b.keys()):
            x, y = fields_a.get(field), fields_b.get(field)
            if (key_shape, field.decode()) in decayed and x and y:
                if not _close_decayed(x, y):
                    problems.append(f"{key} {field!r}: {x!r} != {y!r}")
            elif x != y:
                problems.append(f"{key} {field!r}: {x!r} != {y!r}")
    return problems


def _by_suffix(engine: Engine) -> dict[str, Any]:
    prefix = engine.layout.prefix
    return {k[len(prefix) :]: v for k, v in dump_state(engine).items()}


def _close_decayed(x: bytes, y: bytes) -> bool:
    """Decayed sums added in another order agree to the tolerance the README states.

    Recursive summation of n positive terms in any order stays within about n * 2**-53
    of the exact sum (Higham, Accuracy and Stability of Numerical Algorithms; recalled
    from memory), so 1e-12 covers thousands of events per key; the time reference of
    the sums must be equal exactly.
    """
    ref_x, *sums_x = x.split(b":")
    ref_y, *sums_y = y.split(b":")
    return ref_x == ref_y and all(
        math.isclose(float(p), float(q), rel_tol=1e-12, abs_tol=1e-300)
        for p, q in zip(sums_x, sums_y, strict=True)
    )
