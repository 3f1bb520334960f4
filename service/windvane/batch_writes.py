"""The writes of one batch of events, grouped by key so the batch costs one round trip.

Feature states add to it while the batch is compiled; the store then sends one script
call per hash key and one PFADD per side key. Ordered operations keep their event
order within a key, which is what makes replay deterministic whatever the batch size;
bucket counts are integer sums, so they are pre-added per key, field and bucket.
"""

from __future__ import annotations

from collections.abc import Iterator

BUCKET_OPCODE = "r"


class BatchWrites:
    __slots__ = ("_buckets", "_expire_at_ms", "_members", "_ops", "events")

    def __init__(self) -> None:
        self._ops: dict[str, list[str]] = {}
        self._buckets: dict[str, dict[tuple[str, int, int], int]] = {}
        self._expire_at_ms: dict[str, int] = {}
        self._members: dict[str, tuple[set[str], list[int]]] = {}
        self.events = 0

    def op(self, key: str, *args: str) -> None:
        """An ordered update of one field of the hash at ``key``: an opcode and its arguments."""
        ops = self._ops.get(key)
        if ops is None:
            ops = self._ops[key] = []
        ops.extend(args)

    def count(self, key: str, field: str, bucket: int, span: int, n: int = 1) -> None:
        """Add ``n`` to one time bucket of a bucketed count (commutative, so pre-added)."""
        counts = self._buckets.get(key)
        if counts is None:
            counts = self._buckets[key] = {}
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
        return bool(self._ops or self._buckets or self._members)

    def hash_updates(self) -> Iterator[tuple[str, list[str]]]:
        """(key, script arguments): expiry, argument count, then the key's operations."""
        for key in self._ops.keys() | self._buckets.keys():
            ops = list(self._ops.get(key, ()))
            for (field, bucket, span), n in self._buckets.get(key, {}).items():
                ops += (BUCKET_OPCODE, field, str(bucket), str(n), str(span))
            yield key, [str(self._expire_at_ms.get(key, 0)), str(len(ops)), *ops]

    def member_updates(self) -> Iterator[tuple[str, list[str], int]]:
        """(key, members, expire_at_ms) for each HyperLogLog side key."""
        for key, (members, expire_at) in self._members.items():
            yield key, sorted(members), expire_at[0]
