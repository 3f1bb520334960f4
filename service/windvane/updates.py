"""The update path: events into the writes of a batch, for replay, stream workers and tests.

Each event is routed by its kind to the states that listen to it; restricted events
(limit-ad-tracking or COPPA) skip per-user keys and user-identifying states. Every
touched key is kept until the event's time plus the key's retention, so expiry follows
event time: replaying an old log does not keep old profiles alive longer than live
traffic would have.
"""

from __future__ import annotations

from collections.abc import Iterable

from windvane.batch_writes import BatchWrites
from windvane.events import Event
from windvane.keys import KeyLayout, watermark_field
from windvane.plan import Plan, Scope, Updater


class UpdateRouter:
    """Precomputed routes from an event kind to (scope, updaters), walked once per event."""

    def __init__(self, plan: Plan, layout: KeyLayout) -> None:
        self.layout = layout
        self._routes: dict[str, list[tuple[Scope, list[Updater]]]] = {}
        for kind, updaters in plan.updaters.items():
            grouped: dict[int, tuple[Scope, list[Updater]]] = {}
            for updater in updaters:
                grouped.setdefault(id(updater.scope), (updater.scope, []))[1].append(updater)
            self._routes[kind] = list(grouped.values())

    def add(self, event: Event, writes: BatchWrites) -> None:
        routes = self._routes.get(event.kind)
        if not routes:
            return
        restricted = event.restricted
        state_key = self.layout.state_key
        for scope, updaters in routes:
            if restricted and scope.per_user:
                continue
            values = tuple(getattr(event, name) for name in scope.fields)
            if None in values:
                continue
            key = state_key(scope.fields, values)
            touched = False
            for updater in updaters:
                if restricted and updater.skip_restricted:
                    continue
                updater.state.update(event, key, updater.field, writes)
                touched = True
            if touched:
                writes.keep_until(key, event.ts_ms + scope.ttl_ms)

    def batch(self, events: Iterable[Event]) -> BatchWrites:
        writes = BatchWrites()
        for event in events:
            self.add(event, writes)
            writes.events += 1
        return writes

    def batch_entries(self, shard: int, entries: Iterable[tuple[str, Event]]) -> BatchWrites:
        """Writes for stream entries of one shard, each guarded by the key's shard watermark."""
        writes = BatchWrites(watermark_field(shard))
        for entry_id, event in entries:
            writes.begin_entry(entry_id)
            self.add(event, writes)
            writes.events += 1
        return writes
