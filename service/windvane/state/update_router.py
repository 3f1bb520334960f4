"""The update path: events into the writes of a batch, for replay, stream workers and tests.

Each event is routed by its kind to the states that listen to it; restricted events
(limit-ad-tracking or COPPA) skip per-user keys and user-identifying states. Every
touched key is kept until the event's time plus the key's retention, so expiry follows
event time: replaying an old log does not keep old profiles alive longer than live
traffic would have.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable
from operator import attrgetter

from windvane.definitions.plan import KeyShape, Plan, Updater
from windvane.inputs.events import Event
from windvane.keys import KeyLayout, watermark_field
from windvane.kinds.batch_writes import BatchWrites

KeyOf = Callable[[Event], "str | None"]
Update = Callable[[Event, str, str, BatchWrites], None]


def key_builder(layout: KeyLayout, fields: tuple[str, ...]) -> KeyOf:
    """A function from an event to its key for ``fields`` (None when a field is missing).

    It fills in ``KeyLayout.state_key_format``, with the getters chosen once per key
    shape because it runs for every event and every key the event touches.
    """
    name_key = layout.state_key_format(fields).format
    if len(fields) == 1:
        head = attrgetter(fields[0])

        def single(event: Event) -> str | None:
            value = head(event)
            return None if value is None else name_key(value)

        return single
    values_of = attrgetter(*fields)

    def compound(event: Event) -> str | None:
        values = values_of(event)
        return None if None in values else name_key(*values)

    return compound


class UpdateRouter:
    """Precomputed routes from an event kind to its keys and updates, walked once per event."""

    def __init__(self, plan: Plan, layout: KeyLayout) -> None:
        self.layout = layout
        self._routes: dict[str, list[tuple[KeyOf, bool, int, list[tuple[Update, str, bool]]]]] = {}
        for kind, updaters in plan.updaters.items():
            grouped: dict[int, tuple[KeyShape, list[Updater]]] = {}
            for updater in updaters:
                grouped.setdefault(id(updater.key_shape), (updater.key_shape, []))[1].append(
                    updater
                )
            self._routes[kind] = [
                (
                    key_builder(layout, key_shape.fields),
                    key_shape.per_user,
                    key_shape.ttl_ms,
                    [(u.state.update, u.field, u.skip_restricted) for u in shape_updaters],
                )
                for key_shape, shape_updaters in grouped.values()
            ]

    def add(self, event: Event, writes: BatchWrites) -> None:
        routes = self._routes.get(event.kind)
        if routes is None:
            return
        restricted = event.restricted
        for key_of, per_user, ttl_ms, updates in routes:
            if restricted and per_user:
                continue
            if event.ts_ms + ttl_ms <= writes.now_ms:
                continue  # past its retention: the key would expire at once
            key = key_of(event)
            if key is None:
                continue
            touched = False
            for update, field, skip_restricted in updates:
                if restricted and skip_restricted:
                    continue
                update(event, key, field, writes)
                touched = True
            if touched:
                writes.keep_until(key, event.ts_ms + ttl_ms)

    def batch(self, events: Iterable[Event]) -> BatchWrites:
        writes = BatchWrites()
        for event in events:
            self.add(event, writes)
            writes.counted(event.ts_s)
        return writes

    def batch_entries(self, shard: int, entries: Iterable[tuple[str, Event]]) -> BatchWrites:
        """Writes for stream entries of one shard, each guarded by the key's shard watermark."""
        writes = BatchWrites(watermark_field(shard))
        for entry_id, event in entries:
            writes.begin_entry(entry_id)
            self.add(event, writes)
            writes.counted(event.ts_s)
        return writes
