"""Small helpers shared by the tests: definition files, events, and a full dump of stored state."""

from __future__ import annotations

import itertools
import textwrap
from pathlib import Path
from typing import Any

import redis

from windvane.engine import Engine
from windvane.events import Event, parse_event
from windvane.plan import load_plan
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
        if kind == "hash":
            content: Any = store.dump_hash(key)
        else:
            content = store.read([("PFCOUNT", key)])[0]
        state[key] = (kind if kind == "hash" else "hll", content, store.expire_at_ms(key))
    return state


def redis_client(url: str) -> redis.Redis:
    return redis.Redis.from_url(url)
