"""The engine: a compiled plan bound to a store and a generation, with ``apply`` and ``lookup``.

This is the library face of windvane: the CLI, the HTTP service and the stream
workers each hold an ``Engine`` and call the same two methods.
"""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path
from typing import Any

from windvane.events import Event
from windvane.keys import DEFAULT_GENERATION, KeyLayout
from windvane.lookup import LookupReader
from windvane.lookup_request import LookupRequest, parse_lookup_request
from windvane.plan import Plan, load_plan
from windvane.store import StateStore, open_store
from windvane.updates import UpdateRouter


class Engine:
    def __init__(self, plan: Plan, store: StateStore, generation: str = DEFAULT_GENERATION) -> None:
        self.plan = plan
        self.store = store
        self.layout = KeyLayout(generation)
        self.router = UpdateRouter(plan, self.layout)
        self.reader = LookupReader(plan, self.layout)

    @classmethod
    def open(cls, defs: str | Path, store_url: str, generation: str = DEFAULT_GENERATION) -> Engine:
        return cls(load_plan(defs), open_store(store_url), generation)

    def apply(self, events: Iterable[Event]) -> int:
        """Apply a batch of validated events in one round trip; returns how many."""
        writes = self.router.batch(events)
        self.store.apply(writes)
        return writes.events

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
