"""A short-lived cache of store replies that hold no per-user state (per-app hashes and counts).

Every bid request for a popular app reads the same app state; serving it from the
process for a fraction of a second takes most of that load off the store. Entries are
at most ``max_age_s`` old (never more than a second), so a cached app feature lags
the store by less than that.
"""

from __future__ import annotations

from collections import OrderedDict
from typing import Any

MAX_AGE_LIMIT_S = 1.0


class ReplyCache:
    def __init__(self, max_age_s: float = 0.5, max_entries: int = 50_000) -> None:
        if not 0 <= max_age_s <= MAX_AGE_LIMIT_S:
            raise ValueError(f"max_age_s must lie between 0 and {MAX_AGE_LIMIT_S} seconds")
        self.max_age_s = max_age_s
        self.max_entries = max_entries
        self._entries: OrderedDict[tuple[Any, ...], tuple[float, Any]] = OrderedDict()

    def get(self, command: tuple[Any, ...], now_s: float) -> tuple[bool, Any]:
        """(True, reply) when a fresh reply is cached, else (False, None)."""
        entry = self._entries.get(command)
        if entry is None or now_s - entry[0] > self.max_age_s:
            return False, None
        return True, entry[1]

    def clear(self) -> None:
        self._entries.clear()

    def put(self, command: tuple[Any, ...], reply: Any, now_s: float) -> None:
        if self.max_age_s == 0:
            return
        entries = self._entries
        entries[command] = (now_s, reply)
        entries.move_to_end(command)
        while len(entries) > self.max_entries:
            entries.popitem(last=False)
