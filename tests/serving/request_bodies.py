"""Valid bodies for every endpoint that reads one, and the check of the documented error shape.

The body, size-limit and auth tests start from these, break them, pad them or send them
without the token.
"""

from __future__ import annotations

import time
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

import httpx
import orjson

from tests.conftest import FEATUREDEFS
from tests.in_process import InProcessService
from tests.support import GOOD_SNAPSHOT
from windvane.serving.config import ServiceConfig
from windvane.store import open_store

TOKEN = "body-tests-token"
AUTH = {"Authorization": f"Bearer {TOKEN}"}
NOW = round(time.time())
# Events go to a database of the fixture's redis-server that no other test uses.
STREAM_DB = 7

LOOKUP: dict[str, Any] = {
    "user": "user-3",
    "app": "app-1",
    "ts": NOW,
    "campaigns": ["camp-0", "camp-1"],
    "slot": {"w": 320, "h": 50},
    "device": {"ua": "Mozilla/5.0", "model": "iPhone15,2", "w": 1179, "h": 2556, "pxratio": 3},
    "geo": {"country": "DEU", "utcoffset": 60},
    "deadline_ms": 2000,
}
# Modelled on OpenRTB 2.5 section 6.2.3 (Example 3, Mobile), as in test_http.
BID_REQUEST: dict[str, Any] = {
    "id": "IxexyLDIIk",
    "imp": [{"id": "1", "banner": {"w": 728, "h": 90}}, {"id": "2", "banner": {"w": 320, "h": 50}}],
    "app": {"bundle": "app-1"},
    "device": {"ifa": "user-3", "os": "iOS", "w": 1536, "h": 2048, "pxratio": 2},
    "regs": {"coppa": 0},
}
EVENTS: list[dict[str, Any]] = [
    {"kind": "request", "ts": NOW - 5, "id": "body-1", "user": "user-3", "app": "app-1",
     "slot": {"w": 320, "h": 50}, "device": {"w": 1080, "h": 1920, "pxratio": 3}},
    {"kind": "bid", "ts": NOW - 4, "id": "body-1", "user": "user-3", "app": "app-1",
     "campaign": "camp-0", "price": 1.25},
]  # fmt: skip
SNAPSHOT: dict[str, Any] = {**GOOD_SNAPSHOT, "training": {"notes": "free text", "rows": 1200}}
ACTIVATION: dict[str, Any] = {"arms": [{"version": "v1", "weight": 1}]}


def config(stream_url: str, **settings: Any) -> ServiceConfig:
    """The service on its own embedded store, with the stream on ``stream_url``."""
    return ServiceConfig(
        store=f"memory://bodies-{time.monotonic_ns()}", stream=stream_url, defs=str(FEATUREDEFS),
        token=TOKEN, deadline_ms=2000, **settings,
    ).check()  # fmt: skip


def stream_url(redis_url: str) -> str:
    return redis_url.rsplit("/", 1)[0] + f"/{STREAM_DB}"


@contextmanager
def service(redis_url: str, **settings: Any) -> Iterator[InProcessService]:
    """The service in-process, with model ``m`` version ``v1`` published for activations."""
    url = stream_url(redis_url)
    try:
        with InProcessService(config(url, **settings)) as svc:
            published = svc.request("POST", "/v1/models/m/snapshots", json=SNAPSHOT, headers=AUTH)
            assert published.status_code == 201, published.text
            yield svc
    finally:
        open_store(url).flush()


def padded(document: Any, size: int) -> bytes:
    """``document`` as JSON followed by spaces (still valid JSON) to exactly ``size`` bytes."""
    body = orjson.dumps(document)
    assert len(body) <= size
    return body + b" " * (size - len(body))


def assert_error_shape(answer: httpx.Response) -> dict[str, str]:
    """The answer is exactly ``{"error": {"field": str, "reason": str}}`` as JSON; its error."""
    assert answer.headers["content-type"] == "application/json", answer.headers
    body = answer.json()
    assert list(body) == ["error"], body
    error = body["error"]
    assert sorted(error) == ["field", "reason"], body
    assert isinstance(error["field"], str), body
    assert isinstance(error["reason"], str), body
    assert error["reason"], body
    return error


def assert_rejections_shape(answer: httpx.Response) -> None:
    """POST /v1/events's own 422 when every event is refused: the count and one entry each."""
    body = answer.json()
    assert sorted(body) == ["accepted", "rejected"], body
    assert body["accepted"] == 0, body
    assert body["rejected"], body
    for entry in body["rejected"]:
        assert sorted(entry) == ["field", "index", "reason"], body
