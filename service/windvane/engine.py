"""The engine: a compiled plan bound to a store and a generation, with ``apply`` and ``lookup``.

This is the library face of windvane: the CLI, the HTTP service, the replay and the
stream workers each hold an ``Engine``. Every write goes through ``send``, which also
records the events for the generation once the store confirms them, so the counts
``windvane generations`` shows are kept one way whoever writes.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from pathlib import Path
from typing import Any

from windvane.definitions.plan import Plan, load_plan
from windvane.inputs.events import Event
from windvane.inputs.lookup_request import LookupRequest, parse_lookup_request
from windvane.keys import DEFAULT_GENERATION, KeyLayout
from windvane.kinds.batch_writes import BatchWrites
from windvane.state.lookup_reader import LookupReader
from windvane.state.update_router import UpdateRouter
from windvane.store import StateStore, StoreURL, open_store
from windvane.store.base import PendingWrites
from windvane.store.generations import Generations


class Engine:
    """``source`` says what fills the generation (``replay``, ``stream ingest``), once."""

    def __init__(
        self,
        plan: Plan,
        store: StateStore,
        generation: str = DEFAULT_GENERATION,
        source: str = "replay",
    ) -> None:
        self.plan = plan
        self.store = store
        self.layout = KeyLayout(generation)
        self.router = UpdateRouter(plan, self.layout)
        self.reader = LookupReader(plan, self.layout)
        self.generations = Generations(store)
        self.source = source
        self._registered = False

    @classmethod
    def open(
        cls,
        defs: str | Path,
        store_url: str | StoreURL,
        generation: str | None = None,
        source: str = "replay",
    ) -> Engine:
        """An engine on ``store_url``; without ``generation``, the one lookups read now."""
        plan = load_plan(defs)
        store = open_store(store_url)
        try:
            if generation is None:
                generation = Generations(store).active()
            return cls(plan, store, generation, source)
        except BaseException:
            store.close()
            raise

    @property
    def generation(self) -> str:
        return self.layout.generation

    def send(self, *batches: BatchWrites) -> PendingBatch:
        """Send the batches' writes in one pipelined write and return without waiting.

        ``wait()`` on the answer confirms them and then records their events for the
        generation; a replay parses its next batch in between.
        """
        return PendingBatch(self, self.store.send(*batches), batches)

    def apply(self, events: Iterable[Event]) -> int:
        """Apply a batch of validated events in one round trip; returns how many."""
        return self.send(self.router.batch(events)).wait()

    def apply_entries(self, parts: Sequence[tuple[int, Iterable[tuple[str, Event]]]]) -> int:
        """Apply stream entries of one or more shards in one round trip.

        Each entry's writes are guarded by its shard's watermark, so an entry already
        applied to a key changes nothing.
        """
        return self.send(*(self.router.batch_entries(shard, e) for shard, e in parts)).wait()

    def _record(self, batches: Sequence[BatchWrites]) -> int:
        count = sum(writes.events for writes in batches)
        if count:
            if not self._registered:
                self.generations.register(self.generation, self.source)
                self._registered = True
            first = min(writes.first_ts_s for writes in batches)
            last = max(writes.last_ts_s for writes in batches)
            self.generations.record_range(self.generation, count, first, last)
        return count

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


class PendingBatch:
    """Writes on the wire: ``wait`` confirms them and records them for the generation."""

    __slots__ = ("_batches", "_engine", "_pending")

    def __init__(
        self, engine: Engine, pending: PendingWrites, batches: Sequence[BatchWrites]
    ) -> None:
        self._engine = engine
        self._pending = pending
        self._batches = batches

    def wait(self) -> int:
        """Confirm the writes, record them; returns how many events they carried."""
        self._pending.wait()
        return self._engine._record(self._batches)

    def abandon(self) -> None:
        """Give up on the replies (the caller is failing anyway); nothing is recorded."""
        self._pending.abandon()
