"""Small helpers shared by the tests: definition files, events, and a full dump of stored state."""

from __future__ import annotations

import itertools
import math
import textwrap
import time
from pathlib import Path
from typing import Any

import redis

from windvane.definitions.plan import load_plan
from windvane.engine import Engine
from windvane.inputs.events import Event, parse_event
from windvane.store import open_store

_ids = itertools.count()


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


def redis_client(url: str) -> redis.Redis:
    return redis.Redis.from_url(url)


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
    ref_x, *sums_x = x.split(b":")
    ref_y, *sums_y = y.split(b":")
    return ref_x == ref_y and all(
        math.isclose(float(p), float(q), rel_tol=1e-12, abs_tol=1e-300)
        for p, q in zip(sums_x, sums_y, strict=True)
    )
