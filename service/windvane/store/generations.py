"""Generations: named, side-by-side copies of all feature state, and the pointer lookups follow.

A rebuild (``windvane replay --generation NAME``) fills a new generation while lookups
keep reading the active one; ``activate`` moves the pointer in one SET, which every
serving process picks up within a second; the old generation stays until dropped.
"""

from __future__ import annotations

import time
from typing import Any

import orjson

from windvane.errors import UsageError
from windvane.keys import (
    ACTIVE_GENERATION_KEY,
    DEFAULT_GENERATION,
    GENERATIONS_KEY,
    KeyLayout,
    check_generation,
    generation_stats_key,
)
from windvane.store.base import StateStore
from windvane.store.redis_errors import store_errors

_RECORD_STATS = """
redis.call('HINCRBY', KEYS[1], 'events', ARGV[1])
local first = redis.call('HGET', KEYS[1], 'first_ts')
if (not first) or tonumber(ARGV[2]) < tonumber(first) then
  redis.call('HSET', KEYS[1], 'first_ts', ARGV[2])
end
local last = redis.call('HGET', KEYS[1], 'last_ts')
if (not last) or tonumber(ARGV[3]) > tonumber(last) then
  redis.call('HSET', KEYS[1], 'last_ts', ARGV[3])
end
return 1
"""


class Generations:
    """The generations kept in one store; every method raises only windvane errors."""

    def __init__(self, store: StateStore) -> None:
        self.client = store.client
        self.url = store.url
        self._record = self.client.register_script(_RECORD_STATS)

    def active(self) -> str:
        with store_errors(self.url):
            raw = self.client.get(ACTIVE_GENERATION_KEY)
        return raw.decode() if raw else DEFAULT_GENERATION

    def register(self, name: str, source: str) -> None:
        """Note a generation once, when something first writes to it."""
        check_generation(name)
        meta = {"name": name, "created_at": time.time(), "source": source}
        with store_errors(self.url):
            self.client.hsetnx(GENERATIONS_KEY, name, orjson.dumps(meta))

    def record_range(self, name: str, count: int, first_ts: float, last_ts: float) -> None:
        """Count applied events and widen the generation's event-time range."""
        if count:
            with store_errors(self.url):
                self._record(keys=[generation_stats_key(name)], args=[count, first_ts, last_ts])

    def list(self) -> list[dict[str, Any]]:
        active = self.active()
        with store_errors(self.url):
            known = self.client.hgetall(GENERATIONS_KEY)
        names = {n.decode(): orjson.loads(v) for n, v in known.items()}
        names.setdefault(active, {"name": active, "created_at": None, "source": "default"})
        rows = []
        for name in sorted(names):
            with store_errors(self.url):
                stats = self.client.hgetall(generation_stats_key(name))
            rows.append({
                **names[name],
                "active": name == active,
                "events": int(stats.get(b"events", 0)),
                "first_ts": float(stats[b"first_ts"]) if b"first_ts" in stats else None,
                "last_ts": float(stats[b"last_ts"]) if b"last_ts" in stats else None,
            })  # fmt: skip
        return rows

    def activate(self, name: str) -> None:
        check_generation(name)
        with store_errors(self.url):
            known = self.client.hexists(GENERATIONS_KEY, name) or name == DEFAULT_GENERATION
            if not known:
                raise UsageError(f"no generation named {name!r}; see `windvane generations`")
            self.client.set(ACTIVE_GENERATION_KEY, name)

    def drop(self, name: str, batch: int = 500) -> int:
        """Delete every key of a generation (never the active one); returns how many."""
        check_generation(name)
        if name == self.active():
            raise UsageError(f"{name!r} is the active generation; activate another one first")
        deleted = 0
        keys: list[bytes] = []
        with store_errors(self.url):
            for key in self.client.scan_iter(match=KeyLayout(name).pattern(), count=1000):
                keys.append(key)
                if len(keys) >= batch:
                    deleted += self.client.unlink(*keys)
                    keys = []
            if keys:
                deleted += self.client.unlink(*keys)
            self.client.hdel(GENERATIONS_KEY, name)
            self.client.delete(generation_stats_key(name))
        return deleted
