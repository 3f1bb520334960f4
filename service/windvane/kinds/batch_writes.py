"""The writes of one batch of events, grouped by key so the batch costs one round trip.

Feature states add to it while the batch is compiled; the store then sends one script
call per hash key and one PFADD per side key. Within a key, operations keep their
event order, which is what makes replay deterministic whatever the batch size; bucket
counts are integer sums, so they are pre-added per key, field and bucket.

Events from a stream carry their entry id: each entry's operations form a segment of
their own, and the script applies a segment only if its id is above the key's
watermark for that shard, then raises the watermark in the same atomic step. That is
what makes a redelivered entry (after a crash) change nothing.
"""

from __future__ import annotations

import time
from collections.abc import Iterator

BUCKET_OPCODE = "r"


# One segment: [entry id, ops (opcode and arguments, flat), bucket counts or None].
# A plain list, not an object: a stream batch makes one per entry and key.
_Segment = list


def _segment_args(segment: _Segment) -> list[str]:
    entry, ops, buckets = segment
    if buckets:
        ops = list(ops)
        for (field, bucket, span), n in buckets.items():
            ops += (BUCKET_OPCODE, field, str(bucket), str(n), str(span))
    return [entry, str(len(ops)), *ops]


class BatchWrites:
    """``watermark_field`` (such as ``_w3`` for shard 3) turns on per-entry idempotence."""

    __slots__ = (
        "_entry", "_expire_at_ms", "_members", "_segments", "events", "first_ts_s",
        "last_ts_s", "now_ms", "watermark_field",
    )  # fmt: skip

    def __init__(self, watermark_field: str | None = None) -> None:
        self.watermark_field = watermark_field
        # Wall-clock time of the batch: an event whose key would already have expired
        # is left out, so batching never decides whether it briefly existed.
        self.now_ms = int(time.time() * 1000)
        self._segments: dict[str, list[_Segment]] = {}
        self._expire_at_ms: dict[str, int] = {}
        self._members: dict[str, tuple[set[str], list[int]]] = {}
        self._entry = ""
        # The events routed into the batch and their time range, recorded for the
        # generation once the batch is confirmed (``Engine.send``).
        self.events = 0
        self.first_ts_s = float("inf")
        self.last_ts_s = float("-inf")

    def counted(self, ts_s: float) -> None:
        """One more event of the batch, at event time ``ts_s``."""
        self.events += 1
        if ts_s < self.first_ts_s:
            self.first_ts_s = ts_s
        if ts_s > self.last_ts_s:
            self.last_ts_s = ts_s

    def begin_entry(self, entry_id: str) -> None:
        """Operations from here on belong to the stream entry ``entry_id`` (``ms-seq``)."""
        self._entry = entry_id

    def _segment(self, key: str) -> _Segment:
        segments = self._segments.get(key)
        if segments is None:
            segment = [self._entry, [], None]
            self._segments[key] = [segment]
            return segment
        last = segments[-1]
        if last[0] != self._entry:
            last = [self._entry, [], None]
            segments.append(last)
        return last

    def op(self, key: str, *args: str) -> None:
        """An ordered update of one field of the hash at ``key``: an opcode and its arguments."""
        self._segment(key)[1].extend(args)

    def count(self, key: str, field: str, bucket: int, span: int, n: int = 1) -> None:
        """Add ``n`` to one time bucket of a bucketed count (commutative, so pre-added)."""
        segment = self._segment(key)
        counts = segment[2]
        if counts is None:
            counts = segment[2] = {}
        slot = (field, bucket, span)
        counts[slot] = counts.get(slot, 0) + n

    def keep_until(self, key: str, expire_at_ms: int) -> None:
        """The hash at ``key`` must live at least until ``expire_at_ms`` (epoch milliseconds)."""
        if expire_at_ms > self._expire_at_ms.get(key, 0):
            self._expire_at_ms[key] = expire_at_ms

    def add_member(self, key: str, member: str, expire_at_ms: int) -> None:
        """Add a member to the HyperLogLog at ``key`` and keep it until ``expire_at_ms``."""
        entry = self._members.get(key)
        if entry is None:
            entry = self._members[key] = (set(), [0])
        entry[0].add(member)
        if expire_at_ms > entry[1][0]:
            entry[1][0] = expire_at_ms

    def __bool__(self) -> bool:
        return bool(self._segments or self._members)

    def hash_updates(self) -> Iterator[tuple[str, list[str]]]:
        """(key, script arguments): expiry, watermark field, segment count, then segments."""
        watermark = self.watermark_field or ""
        for key, segments in self._segments.items():
            args = [str(self._expire_at_ms.get(key, 0)), watermark, str(len(segments))]
            for segment in segments:
                args += _segment_args(segment)
            yield key, args

    def member_updates(self) -> Iterator[tuple[str, list[str], int]]:
        """(key, members, expire_at_ms) for each HyperLogLog side key."""
        for key, (members, expire_at) in self._members.items():
            yield key, sorted(members), expire_at[0]
