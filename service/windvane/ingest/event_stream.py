"""The event stream: Redis Streams sharded by user, and how producers append to it.

Entry format, for producers in any language: ``XADD wv:events:{s<n>} * event <json>``,
where ``<json>`` is one event exactly as a log line (see the README's event table) and
``n`` is the shard: ``blake2b(key, digest_size=8)`` as a big-endian unsigned integer,
modulo the shard count, where ``key`` is the event's ``user``, or its ``app`` when it
has no user, or its ``id`` when it has neither. The shard count is stored at
``wv:events:shards``. All events of one user land in one shard, so one worker applies
them in order.
"""

from __future__ import annotations

import hashlib
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import Any

import orjson
import redis
import redis.asyncio

from windvane.errors import BadEvent, StoreUnavailable, UsageError
from windvane.inputs.events import Event, parse_event
from windvane.inputs.json_body import DEPTH_REASON, MAX_DEPTH, deeper_than, depth_problem
from windvane.keys import (
    INGEST_WORKERS_KEY,
    SHARD_COUNT_KEY,
    consumer_group,
    ingest_status_key,
    stream_key,
)
from windvane.store.clients import async_redis_client, redis_client
from windvane.store.redis_errors import describe, store_errors
from windvane.store.url import server_url

DEFAULT_SHARDS = 4
# A blocking client of the stream's server, made by ``open_stream``.
StreamClient = redis.Redis
ENTRY_FIELD = b"event"


def shard_of(event: Event, shards: int) -> int:
    return shard_of_key(event.user or event.app or event.id, shards)


def shard_of_key(key: str, shards: int) -> int:
    """The shard of a user id (or app, or auction id): stable across processes and languages."""
    digest = hashlib.blake2b(key.encode(), digest_size=8).digest()
    return int.from_bytes(digest, "big") % shards


@dataclass(frozen=True)
class Rejected:
    index: int
    field: str
    reason: str

    def to_dict(self) -> dict[str, Any]:
        return {"index": self.index, "field": self.field, "reason": self.reason}


def decode_body(body: bytes) -> list[Any]:
    """A POST body: a JSON array of events, or JSON Lines (one event per line)."""
    stripped = body.lstrip()
    if stripped.startswith(b"["):
        try:
            items = orjson.loads(stripped)
        except orjson.JSONDecodeError as exc:
            raise BadEvent("", f"the body is not a valid JSON array ({exc})") from None
        return list(items)
    items: list[Any] = []
    for line in body.splitlines():
        if not line.strip():
            continue
        try:
            items.append(orjson.loads(line))
        except orjson.JSONDecodeError as exc:
            items.append(_Unreadable(str(exc)))
    return items


class _Unreadable:
    def __init__(self, reason: str) -> None:
        self.reason = reason


def prepare(items: Sequence[Any], shards: int) -> tuple[list[tuple[int, bytes]], list[Rejected]]:
    """Validate each item with the replay rules: (shard, entry bytes) to append, and rejections."""
    accepted: list[tuple[int, bytes]] = []
    rejected: list[Rejected] = []
    # One pass over the whole batch (the list is one level more) spares a walk per event.
    any_too_deep = deeper_than(items, MAX_DEPTH + 1)
    for index, item in enumerate(items):
        if isinstance(item, _Unreadable):
            rejected.append(Rejected(index, "", f"not valid JSON ({item.reason})"))
            continue
        too_deep = depth_problem(item) if any_too_deep else None
        if too_deep is not None:  # it would pass the checks below and fail to re-encode
            rejected.append(Rejected(index, too_deep, DEPTH_REASON))
            continue
        try:
            event = parse_event(item)
        except BadEvent as exc:
            rejected.append(Rejected(index, exc.field, exc.reason))
            continue
        accepted.append((shard_of(event, shards), orjson.dumps(item)))
    return accepted, rejected


def shard_count(client: redis.Redis, wanted: int | None = None) -> int:
    """The stream's shard count, fixed by whoever used it first; a mismatch is refused."""
    proposed = wanted or DEFAULT_SHARDS
    with store_errors(describe(client)):
        client.set(SHARD_COUNT_KEY, proposed, nx=True)
        stored = int(client.get(SHARD_COUNT_KEY) or proposed)
    if wanted is not None and wanted != stored:
        raise UsageError(
            f"the stream already has {stored} shards; producers and workers must agree "
            f"(drop --shards or use {stored})"
        )
    return stored


def append(client: redis.Redis, entries: Iterable[tuple[int, bytes]]) -> list[str]:
    """Append entries in one pipelined round trip; returns their stream ids."""
    pipe = client.pipeline(transaction=False)
    for shard, body in entries:
        pipe.xadd(stream_key(shard), {ENTRY_FIELD: body})
    with store_errors(describe(client)):
        ids = pipe.execute()
    return [i.decode() if isinstance(i, bytes) else i for i in ids]


async def append_async(
    client: redis.asyncio.Redis, entries: Iterable[tuple[int, bytes]]
) -> list[str]:
    """The same as ``append`` on an asyncio client, for the HTTP service."""
    pipe = client.pipeline(transaction=False)
    for shard, body in entries:
        pipe.xadd(stream_key(shard), {ENTRY_FIELD: body})
    with store_errors(describe(client)):
        ids = await pipe.execute()
    return [i.decode() if isinstance(i, bytes) else i for i in ids]


def open_stream(url: str, timeout_s: float = 5.0) -> StreamClient:
    """A client of the event stream at ``url``, which must be a Redis server."""
    return redis_client(server_url(url, "the event stream"), timeout_s)


def drop_consumer_groups(client: redis.Redis, generation: str) -> None:
    """A dropped generation's consumer groups would keep the stream from being trimmed."""
    with store_errors(describe(client)):
        shards = int(client.get(SHARD_COUNT_KEY) or 0)
        for number in range(shards):
            try:
                client.xgroup_destroy(stream_key(number), consumer_group(generation))
            except redis.exceptions.ResponseError:
                continue  # that shard never had the group


def read_statuses(client: redis.Redis) -> list[dict[str, Any]]:
    """The last status of every live worker (entries of stopped workers expire)."""
    with store_errors(describe(client)):
        names = sorted(
            (n.decode() if isinstance(n, bytes) else n) for n in client.smembers(INGEST_WORKERS_KEY)
        )
        if not names:
            return []
        raws = client.mget([ingest_status_key(n) for n in names])
        gone = [n for n, raw in zip(names, raws, strict=True) if raw is None]
        if gone:
            client.srem(INGEST_WORKERS_KEY, *gone)
    return [orjson.loads(raw) for raw in raws if raw is not None]


class EventStream:
    """The producer side of the event stream, for ``POST /v1/events`` of the service."""

    def __init__(self, sync: redis.Redis, client: redis.asyncio.Redis, shards: int) -> None:
        self.sync = sync
        self.client = client
        self.shards = shards

    @classmethod
    def open(cls, url: str, shards: int | None) -> EventStream:
        """Connect; when the stream is down now, start with ``shards`` (or the default)."""
        parsed = server_url(url, "the event stream")
        sync = redis_client(parsed)
        try:
            count = shard_count(sync, shards)
        except StoreUnavailable:
            count = shards or DEFAULT_SHARDS
        return cls(sync, async_redis_client(parsed, 5.0), count)

    async def append(self, entries: Iterable[tuple[int, bytes]]) -> list[str]:
        return await append_async(self.client, entries)

    def statuses(self) -> list[dict[str, Any]]:
        """The ingest workers' last statuses (blocking: call it off the event loop)."""
        return read_statuses(self.sync)

    async def close(self) -> None:
        await self.client.aclose()
        self.sync.close()
