"""The imps of one BidRequest are answered from one store read, each as its own lookup would be.

Read apart, two imps of one user could see different stored states (one read in time,
the next not). The service reads once for all of them, each distinct command once, and
each answer must still equal the engine's answer to that imp alone.
"""

from __future__ import annotations

import asyncio
import time
from collections.abc import Sequence
from pathlib import Path
from typing import Any

from tests.conftest import FEATUREDEFS
from tests.support import engine_for, replay_good_lines
from windvane.inputs.openrtb import lookups_from_bid_request
from windvane.models.cache import ModelCache
from windvane.models.registry import ModelRegistry
from windvane.serving.lookup_service import LookupService
from windvane.serving.reply_cache import ReplyCache
from windvane.store.async_store import AsyncStateStore
from windvane.store.clients import async_redis_client
from windvane.store.url import parse_store_url

NOW = round(time.time())
# Modelled on OpenRTB 2.5 section 6.2.3 (Example 3, Mobile), trimmed to the fields read:
# three imps (two of the same size) for one user in one app.
BID_REQUEST = {
    "id": "one-read",
    "imp": [
        {"id": "1", "banner": {"w": 728, "h": 90}},
        {"id": "2", "banner": {"w": 320, "h": 50}},
        {"id": "3", "banner": {"w": 320, "h": 50}},
    ],
    "app": {"bundle": "app-1"},
    "device": {"ifa": "user-3", "os": "iOS", "w": 1536, "h": 2048, "pxratio": 2},
}


class RecordingStore(AsyncStateStore):
    """The real store, keeping the commands of each read it is asked for."""

    def __init__(self, url: str) -> None:
        super().__init__(async_redis_client(parse_store_url(url), retry=False), url)
        self.reads: list[list[tuple[Any, ...]]] = []

    async def read(
        self, commands: Sequence[tuple[Any, ...]], timeout_s: float | None = None
    ) -> list[Any]:
        self.reads.append(list(commands))
        return await super().read(commands, timeout_s)


def test_the_imps_of_a_bid_request_are_read_once(store_url: str, tmp_path: Path) -> None:
    engine = engine_for(FEATUREDEFS, store_url)
    replay_good_lines(engine, tmp_path)
    imps = lookups_from_bid_request(BID_REQUEST, ("camp-0", "camp-1"), ts_s=NOW)
    requests = [request for _, request in imps]

    async def answer() -> tuple[list[dict[str, Any]], list[list[tuple[Any, ...]]]]:
        store = RecordingStore(store_url)
        models = ModelCache(ModelRegistry(engine.store, {}), frozenset())
        # No reply cache: every command must come from the one read.
        service = LookupService(engine.reader, store, ReplyCache(0), models, 5000)
        try:
            return await service.lookup_many(requests), store.reads
        finally:
            await store.close()

    try:
        answers, reads = asyncio.run(answer())
        assert len(reads) == 1
        (commands,) = reads
        assert len(set(commands)) == len(commands)
        assert set(commands) == set(engine.reader.prepare(requests[0]).commands)
        for request, got in zip(requests, answers, strict=True):
            assert {k: v for k, v in got.items() if k != "elapsed_ms"} == engine.lookup(request)
        assert [got["stored"] for got in answers] == ["ok"] * 3
        assert answers[0]["features"]["imps_24h"] is not None
    finally:
        engine.close()
