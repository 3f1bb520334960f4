"""The stream worker: apply shard streams to one generation's state, exactly once in effect.

Delivery from a Redis Stream is at least once; the state is not allowed to be. Three
things make that so:

- **one owner per shard**: a worker applies a shard only while it holds the shard's
  lease (``SET NX PX``, renewed every loop), so one user's events are applied in
  order by one process;
- **a watermark per key and shard**: every key remembers the last entry of each shard
  applied to it, updated in the same atomic script as the state, so an entry
  delivered again after a crash changes nothing;
- **acknowledge after the write**: an entry is acknowledged only once its effect (or
  its dead letter) is stored; a worker that dies leaves it pending, and the next owner
  of the shard claims it (XAUTOCLAIM, after ``claim_idle_ms``) before it reads new
  entries.

A store or stream outage is retried with backoff, reported in one status line, and
loses nothing: the batch in hand is applied again once the store answers.
"""

from __future__ import annotations

import socket
import sys
import time
import uuid
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any, TextIO

import orjson
import redis

from windvane.engine import Engine
from windvane.errors import BadEvent, StoreError
from windvane.ingest.event_stream import ENTRY_FIELD, shard_count
from windvane.ingest.freshness import FreshnessWindow
from windvane.inputs.events import Event, parse_event_line
from windvane.keys import (
    DEAD_LETTER_KEY,
    INGEST_WORKERS_KEY,
    consumer_group,
    ingest_status_key,
    lease_key,
    stream_key,
)
from windvane.store.redis_errors import describe, store_errors

DEAD_LETTER_MAXLEN = 100_000
# Entries appended this long before a top-up's start time are read too, for clock skew.
CLOCK_SKEW_S = 600

_RENEW = """
if redis.call('GET', KEYS[1]) == ARGV[1] then
  return redis.call('PEXPIRE', KEYS[1], ARGV[2])
end
return 0
"""


@dataclass
class IngestSettings:
    shards: tuple[int, ...] | None = None  # None: every shard
    batch: int = 1000
    lease_ms: int = 5000
    claim_idle_ms: int = 5000
    block_ms: int = 100
    from_ts: float | None = None
    status_every_s: float = 5.0
    trim_every_s: float = 10.0
    # Stream history kept after every group has acknowledged it, so a rebuilt generation
    # can be topped up from a time in the recent past (see the backfill runbook).
    retain_s: float = 7200.0
    name: str = field(default_factory=lambda: f"{socket.gethostname()}-{uuid.uuid4().hex[:8]}")


# A stream entry as read: its id and its fields (a flat list raw, a dict from XAUTOCLAIM).
Entry = tuple[bytes, "list[bytes] | dict[bytes, bytes] | None"]
DeadLetter = tuple[str, bytes, str, str]  # entry id, body, field, reason


@dataclass
class _Shard:
    number: int
    recovering: bool = True
    cursor: str = "0-0"
    retry: list[Entry] = field(default_factory=list)


class IngestWorker:
    def __init__(
        self,
        engine: Engine,
        stream: redis.Redis,
        settings: IngestSettings,
        out: TextIO | None = None,
        stream_url: str = "",
    ) -> None:
        self.engine = engine
        self.stream = stream
        self.settings = settings
        self.out = out or sys.stderr
        self.stream_url = stream_url or describe(stream)
        self.generation = engine.layout.generation
        self.group = consumer_group(self.generation)
        self.name = settings.name
        self.window = FreshnessWindow()
        self.owned: dict[int, _Shard] = {}
        self._renew = stream.register_script(_RENEW)
        # The same connections, with XREADGROUP's reply left as the server sent it.
        self._raw_stream = redis.Redis(connection_pool=stream.connection_pool)
        self._raw_stream.set_response_callback("XREADGROUP", _as_sent)
        self._groups_ready: set[int] = set()
        self._shards = 0
        self._next_status_s = time.monotonic() + settings.status_every_s
        self._next_trim_s = time.monotonic() + settings.trim_every_s
        self._down_since: float | None = None
        self._next_lease_s = 0.0
        self.totals = {"events": 0, "dead_letters": 0, "skipped": 0}
        self.claimed = 0

    # ---- the loop ----

    def run(self, stop: Callable[[], bool] = lambda: False) -> None:
        """Work until ``stop()`` is true; outages are retried with backoff, never raised."""
        backoff_s = 0.1
        # Short enough that a passing error never lets this worker's leases lapse.
        max_backoff_s = min(5.0, self.settings.lease_ms / 3000)
        self.engine.generations.register(self.generation, "stream ingest")
        while not stop():
            try:
                self.step()
                if self._down_since is not None:
                    self._say(f"ingest {self.name}: store and stream answer again; resuming")
                    self._down_since = None
                backoff_s = 0.1
            except StoreError as exc:
                if self._down_since is None:
                    self._down_since = time.monotonic()
                    self._say(
                        f"ingest {self.name}: store or stream unreachable ({_short(exc)}); "
                        "retrying with backoff, nothing acknowledged meanwhile"
                    )
                time.sleep(backoff_s)
                backoff_s = min(backoff_s * 2, max_backoff_s)
        self.release()

    def step(self) -> int:
        """One round: leases, claims or reads, apply, acknowledge. Returns entries handled.

        Raises only windvane errors: ``StoreUnavailable`` when the store or the stream
        does not answer, which ``run`` retries.
        """
        with store_errors(self.stream_url):
            return self._step()

    def _step(self) -> int:
        if not self._shards:
            self._shards = shard_count(self.stream)
        self._leases()
        handled = 0
        readable: list[_Shard] = []
        for shard in list(self.owned.values()):
            if shard.retry:
                handled += self._apply(shard, shard.retry)
            elif shard.recovering:
                handled += self._recover(shard)
            else:
                readable.append(shard)
        if readable:
            delivered = self._read(readable, block=not handled)
            # Every shard holds its delivered entries before any is applied, so a failure
            # leaves all of them in hand for the retry.
            for shard, entries in delivered:
                shard.retry = entries
            if delivered:
                handled += self._apply_all(delivered)
        elif not handled:
            time.sleep(self.settings.block_ms / 1000)
        now = time.monotonic()
        if now >= self._next_trim_s:
            self._trim()
            self._next_trim_s = now + self.settings.trim_every_s
        if now >= self._next_status_s:
            self.status()
            self._next_status_s = now + self.settings.status_every_s
        return handled

    # ---- shards and leases ----

    def _eligible(self) -> tuple[int, ...]:
        wanted = self.settings.shards
        return tuple(range(self._shards)) if wanted is None else wanted

    def _leases(self) -> None:
        """Renew held leases (a third of their life at most after the last renewal, in one
        pipeline) and try to take free shards, at most once per that interval."""
        now = time.monotonic()
        if now < self._next_lease_s:
            return
        ttl = self.settings.lease_ms
        held = [n for n in self._eligible() if n in self.owned]
        if held:
            pipe = self.stream.pipeline(transaction=False)
            for number in held:
                key = lease_key(self.group, number)
                self._renew(keys=[key], args=[self.name, ttl], client=pipe)
            for number, renewed in zip(held, pipe.execute(), strict=True):
                if not renewed:
                    self._say(
                        f"ingest {self.name}: lease on shard {number} lapsed; "
                        "taking it again once it is free"
                    )
                    del self.owned[number]
        for number in self._eligible():
            if number in self.owned or number in held:
                continue
            if self.stream.set(lease_key(self.group, number), self.name, nx=True, px=ttl):
                self._ensure_group(number)
                self.owned[number] = _Shard(number)
        self._next_lease_s = now + ttl / 3000

    def _ensure_group(self, number: int) -> None:
        if number in self._groups_ready:
            return
        start = "0"
        if self.settings.from_ts is not None:
            start = f"{max(0, int((self.settings.from_ts - CLOCK_SKEW_S) * 1000))}-0"
        try:
            self.stream.xgroup_create(stream_key(number), self.group, id=start, mkstream=True)
        except redis.exceptions.ResponseError as exc:
            if "BUSYGROUP" not in str(exc):
                raise
        self._groups_ready.add(number)

    def reserve(self) -> list[int]:
        """Create this generation's consumer groups without applying anything.

        A group holds its place in the stream, and workers never trim past a group's
        place, so reserving before a long rebuild keeps the stream from ``from_ts`` on.
        """
        self._shards = self._shards or shard_count(self.stream)
        numbers = list(self._eligible())
        with store_errors(self.stream_url):
            for number in numbers:
                self._ensure_group(number)
        return numbers

    def release(self) -> None:
        """Give the leases back at a clean stop, so another worker can take over at once."""
        for number in list(self.owned):
            key = lease_key(self.group, number)
            try:
                if self.stream.get(key) == self.name.encode():
                    self.stream.delete(key)
            except redis.exceptions.RedisError:
                pass
        self.owned.clear()

    def _recover(self, shard: _Shard) -> int:
        """Claim what earlier owners left pending, in id order, before reading anything new."""
        key = stream_key(shard.number)
        cursor, claimed, *_ = self.stream.xautoclaim(
            key, self.group, self.name, self.settings.claim_idle_ms,
            start_id=shard.cursor, count=self.settings.batch,
        )  # fmt: skip
        shard.cursor = cursor.decode() if isinstance(cursor, bytes) else cursor
        handled = 0
        if claimed:
            handled = self._apply(shard, claimed)
            self.claimed += len(claimed)
            self._say(
                f"ingest {self.name}: shard {shard.number}: applied {len(claimed):,} entries "
                "an earlier owner left unacknowledged"
            )
        if shard.cursor == "0-0":
            pending = self.stream.xpending(key, self.group)
            others = [c for c in pending.get("consumers", []) if _text(c["name"]) != self.name]
            if not any(int(c["pending"]) for c in others):
                shard.recovering = False
                for consumer in self.stream.xinfo_consumers(key, self.group):
                    if _text(consumer["name"]) != self.name and int(consumer["pending"]) == 0:
                        self.stream.xgroup_delconsumer(key, self.group, consumer["name"])
        return handled

    # ---- applying ----

    def _read(self, shards: list[_Shard], block: bool) -> list[tuple[_Shard, list[Entry]]]:
        """New entries of ``shards`` in one XREADGROUP, as the server sent them.

        The reply is taken raw (hiredis's nested lists) rather than through redis-py's
        reply parser, which builds a dict per entry in Python: a tenth of a worker's time.
        """
        keys = [stream_key(s.number) for s in shards]
        command: list[Any] = ["XREADGROUP", "GROUP", self.group, self.name]
        command += ["COUNT", self.settings.batch]
        if block:
            command += ["BLOCK", self.settings.block_ms]
        command += ["STREAMS", *keys, *([">"] * len(keys))]
        replies = self._raw_stream.execute_command(*command)
        by_key = {key.encode(): shard for key, shard in zip(keys, shards, strict=True)}
        if not replies:
            return []
        pairs = replies.items() if isinstance(replies, dict) else replies  # RESP3 or RESP2
        return [(by_key[key], entries) for key, entries in pairs if entries]

    def _apply(self, shard: _Shard, entries: list[Entry]) -> int:
        shard.retry = list(entries)
        return self._apply_all([(shard, entries)])

    def _apply_all(self, delivered: list[tuple[_Shard, list[Entry]]]) -> int:
        """Apply entries of several shards with one state write and one acknowledgement."""
        parts: list[tuple[int, list[tuple[str, Event]]]] = []
        done: list[tuple[_Shard, list[bytes], list[DeadLetter]]] = []
        every: list[tuple[str, Event]] = []
        skipped = handled = dead_count = 0
        from_ts = self.settings.from_ts
        for shard, entries in delivered:
            good: list[tuple[str, Event]] = []
            dead: list[DeadLetter] = []
            for raw_id, fields in entries:
                entry_id = raw_id.decode()
                body = _body(fields)
                try:
                    event = parse_event_line(body)
                except BadEvent as exc:
                    dead.append((entry_id, body, exc.field, exc.reason))
                    continue
                if from_ts is not None and event.ts_s < from_ts:
                    skipped += 1
                    continue
                good.append((entry_id, event))
            if good:
                parts.append((shard.number, good))
                every += good
            done.append((shard, [raw_id for raw_id, _ in entries], dead))
            handled += len(entries)
            dead_count += len(dead)
        if parts:
            self.write(parts)
        self.acknowledge(done)
        for shard, _ in delivered:
            shard.retry = []
        written = time.time()
        self.window.record(
            [e.ts_s for _, e in every], [int(i.split("-", 1)[0]) for i, _ in every], written
        )
        self.window.dead_letters += dead_count
        self.window.skipped += skipped
        self.totals["events"] += len(every)
        self.totals["dead_letters"] += dead_count
        self.totals["skipped"] += skipped
        return handled

    def write(self, parts: list[tuple[int, list[tuple[str, Event]]]]) -> None:
        """The state write: idempotent per entry, so it may be repeated after any failure."""
        self.engine.apply_entries(parts)

    def acknowledge(self, done: list[tuple[_Shard, list[bytes], list[DeadLetter]]]) -> None:
        """Dead letters first, then the acknowledgements: only after the state write."""
        pipe = self.stream.pipeline(transaction=False)
        for shard, ids, dead in done:
            for entry_id, body, field_name, reason in dead:
                pipe.xadd(
                    DEAD_LETTER_KEY,
                    {b"shard": str(shard.number), b"entry": entry_id, b"group": self.group,
                     b"field": field_name, b"reason": reason, ENTRY_FIELD: body},
                    maxlen=DEAD_LETTER_MAXLEN, approximate=True,
                )  # fmt: skip
            if ids:
                pipe.xack(stream_key(shard.number), self.group, *ids)
        pipe.execute()

    # ---- housekeeping ----

    def _trim(self) -> None:
        """Drop entries every group is done with and older than ``retain_s``; never one unread."""
        kept_from = f"{int((time.time() - self.settings.retain_s) * 1000)}-0"
        for number in self.owned:
            key = stream_key(number)
            floor: str | None = kept_from
            for group in self.stream.xinfo_groups(key):
                pending = self.stream.xpending(key, group["name"])
                if int(pending["pending"]):
                    candidate = _text(pending["min"])
                else:
                    candidate = _next_id(_text(group["last-delivered-id"]))
                if floor is None or _id_key(candidate) < _id_key(floor):
                    floor = candidate
            if floor is not None and floor != "0-0":
                self.stream.xtrim(key, minid=floor, approximate=True)

    def pending(self) -> int:
        total = 0
        for number in self.owned:
            total += int(self.stream.xpending(stream_key(number), self.group)["pending"])
        return total

    def status(self) -> dict[str, Any]:
        """Print one status line and publish the same numbers for the service."""
        numbers = self.window.report()
        status = {
            "worker": self.name,
            "generation": self.generation,
            "shards": sorted(self.owned),
            "pending": self.pending(),
            "at": time.time(),
            **numbers,
        }
        self.stream.set(ingest_status_key(self.name), orjson.dumps(status), px=30_000)
        self.stream.sadd(INGEST_WORKERS_KEY, self.name)
        self._say(
            f"ingest {self.name} gen={self.generation} shards={_shards(status['shards'])}: "
            f"{numbers['events_per_s']:,.0f} events/s, lag from event "
            f"p50 {_s(numbers['event_lag_p50_s'])} p99 {_s(numbers['event_lag_p99_s'])}, "
            f"from append p50 {_s(numbers['append_lag_p50_s'])} "
            f"p99 {_s(numbers['append_lag_p99_s'])}, pending {status['pending']:,}, "
            f"dead letters {numbers['dead_letters']:,}"
        )
        return status

    def _say(self, line: str) -> None:
        self.out.write(line + "\n")
        self.out.flush()


def _as_sent(reply: Any, **options: Any) -> Any:
    return reply


def _body(fields: list[bytes] | dict[bytes, bytes] | None) -> bytes:
    """The event of an entry; empty (a dead letter) when a producer left it out."""
    if not fields:
        return b""
    if isinstance(fields, dict):
        return fields.get(ENTRY_FIELD, b"")
    for i in range(0, len(fields) - 1, 2):
        if fields[i] == ENTRY_FIELD:
            return fields[i + 1]
    return b""


def _text(value: bytes | str) -> str:
    return value.decode() if isinstance(value, bytes) else value


def _id_key(entry_id: str) -> tuple[int, int]:
    ms, _, seq = entry_id.partition("-")
    return int(ms), int(seq or 0)


def _next_id(entry_id: str) -> str:
    ms, seq = _id_key(entry_id)
    return f"{ms}-{seq + 1}"


def _short(exc: BaseException) -> str:
    text = str(exc).splitlines()[0] if str(exc) else type(exc).__name__
    return text[:160]


def _s(value: float | int | None) -> str:
    return "-" if value is None else f"{value:.2f}s"


def _shards(numbers: list[int]) -> str:
    return ",".join(map(str, numbers)) or "none"
