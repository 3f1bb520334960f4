"""The engine: a compiled plan bound to a store and a generation, with ``apply`` and ``lookup``.

This is the library face of windvane: the CLI, the HTTP service and the stream
workers each hold an ``Engine`` and call the same two methods.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Any

from windvane.definitions.plan import Plan, load_plan
from windvane.inputs.events import Event
from windvane.inputs.lookup_request import LookupRequest, parse_lookup_request
from windvane.keys import DEFAULT_GENERATION, KeyLayout
from windvane.state.lookup_reader import LookupReader
from windvane.state.update_router import UpdateRouter
from windvane.store import StateStore, open_store
from windvane.store.generations import Generations


class Engine:
    def __init__(self, plan: Plan, store: StateStore, generation: str = DEFAULT_GENERATION) -> None:
        self.plan = plan
        self.store = store
        self.layout = KeyLayout(generation)
        self.router = UpdateRouter(plan, self.layout)
        self.reader = LookupReader(plan, self.layout)
        self._generations: Generations | None = None

    @classmethod
    def open(cls, defs: str | Path, store_url: str, generation: str | None = None) -> Engine:
        """An engine on ``store_url``; without ``generation``, the one lookups read now."""
        plan = load_plan(defs)
        store = open_store(store_url)
        if generation is None:
            generation = Generations(store.client, store_url).active()  # type: ignore[attr-defined]
        return cls(plan, store, generation)

    def record(self, count: int, first_ts: float, last_ts: float) -> None:
        """Add applied events to the generation's counts and time range (``generations``)."""
        if self._generations is None:
            self._generations = Generations(self.store.client, self.store.url)  # type: ignore[attr-defined]
            self._generations.register(self.layout.generation, "replay")
        self._generations.record_range(self.layout.generation, count, first_ts, last_ts)

    def apply(self, events: Iterable[Event]) -> int:
        """Apply a batch of validated events in one round trip; returns how many."""
        writes = self.router.batch(events)
        self.store.apply(writes)
        return writes.events

    def apply_shards(self, parts: Sequence[tuple[int, Iterable[tuple[str, Event]]]]) -> int:
        """Apply stream entries of one or more shards in one round trip.

        Each entry's writes are guarded by its shard's watermark, so an entry already
        applied to a key changes nothing.
        """
        batches = [self.router.batch_entries(shard, entries) for shard, entries in parts]
        self.store.apply(*batches)
        return sum(writes.events for writes in batches)

    def lookup(self, request: LookupRequest | dict[str, Any]) -> dict[str, Any]:
        """Features for one lookup request (a parsed request or its JSON object)."""
        if not isinstance(request, LookupRequest):
            request = parse_lookup_request(request)
        prepared = self.reader.prepare(request)
        replies = self.store.read(prepared.commands) if prepared.commands else []
        return self.reader.answer(prepared, replies)

    def close(self) -> None:
        self.store.close()

    def __enter__(self) -> Engine:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()
