"""Request bodies are bounded per endpoint: a 413 one byte past the limit, read no further.

Each endpoint that reads a body answers a body of exactly its limit as usual and one
byte more with a 413 in the documented shape; a Content-Length over the limit is
refused before a byte of the body is asked for, and a body streamed without one is
read only until its running total passes the limit. The limits are settings (flags and
the configuration file), checked at start.
"""

from __future__ import annotations

import asyncio
import re
import socket
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx
import pytest

from tests.conftest import FEATUREDEFS
from tests.in_process import InProcessService, Message, running
from tests.redis_server import RedisServer
from tests.service_process import ServiceProcess
from tests.serving.request_bodies import (
    ACTIVATION,
    AUTH,
    BID_REQUEST,
    EVENTS,
    LOOKUP,
    SNAPSHOT,
    TOKEN,
    assert_error_shape,
    config,
    padded,
    service,
    stream_url,
)
from windvane.errors import UsageError
from windvane.serving.app import create_app
from windvane.serving.config import ENVIRONMENT_KEY, ServiceConfig, load_config
from windvane.serving.limits import (
    DEFAULT_MAX_EVENTS_BYTES,
    DEFAULT_MAX_LOOKUP_BYTES,
    DEFAULT_MAX_MODEL_BYTES,
    DEFAULT_MAX_OPENRTB_BYTES,
    KIB,
    MIB,
)

# (path, a valid body, the setting that bounds it, the status of that body within the limit)
ENDPOINTS = [
    ("/v1/lookup", LOOKUP, "max_lookup_bytes", 200),
    ("/v1/lookup/openrtb", BID_REQUEST, "max_openrtb_bytes", 200),
    ("/v1/events", EVENTS, "max_events_bytes", 200),
    ("/v1/models/m/snapshots", {**SNAPSHOT, "version": "at-limit"}, "max_model_bytes", 201),
    ("/v1/models/m/activate", ACTIVATION, "max_model_bytes", 200),
]
IDS = [path for path, *_ in ENDPOINTS]
# Small limits, one per setting, each different, so that a mix-up between them shows.
CONFIGURED = {
    "max_lookup_bytes": 2 * KIB,
    "max_openrtb_bytes": 3 * KIB,
    "max_events_bytes": 5 * KIB,
    "max_model_bytes": 4 * KIB,
}


def test_the_defaults() -> None:
    defaults = ServiceConfig()
    assert defaults.max_lookup_bytes == DEFAULT_MAX_LOOKUP_BYTES == 64 * KIB
    assert defaults.max_openrtb_bytes == DEFAULT_MAX_OPENRTB_BYTES == 256 * KIB
    assert defaults.max_events_bytes == DEFAULT_MAX_EVENTS_BYTES == 4 * MIB
    assert defaults.max_model_bytes == DEFAULT_MAX_MODEL_BYTES == 1 * MIB


@pytest.fixture(scope="module")
def default_svc(redis_server: RedisServer) -> Iterator[InProcessService]:
    with service(redis_server.url) as svc:
        yield svc


@pytest.fixture(scope="module")
def configured_svc(redis_server: RedisServer) -> Iterator[InProcessService]:
    with service(redis_server.url, **CONFIGURED) as svc:
        yield svc


@pytest.mark.parametrize("limits", ["default", "configured"])
@pytest.mark.parametrize(("path", "document", "setting", "status"), ENDPOINTS, ids=IDS)
def test_a_body_at_the_limit_is_read_and_one_byte_more_is_a_413(
    request: pytest.FixtureRequest, limits: str, path: str, document: Any, setting: str,
    status: int,
) -> None:  # fmt: skip
    svc: InProcessService = request.getfixturevalue(f"{limits}_svc")
    limit = getattr(
        ServiceConfig(**CONFIGURED) if limits == "configured" else ServiceConfig(), setting
    )
    history = svc.request("GET", "/v1/models/m/history").json()["versions"]

    over = svc.request("POST", path, content=padded(document, limit + 1), headers=AUTH)
    assert over.status_code == 413
    error = assert_error_shape(over)
    assert error == {
        "field": "",
        "reason": f"the body is larger than this endpoint's limit of {limit:,} bytes",
    }
    assert svc.request("GET", "/v1/models/m/history").json()["versions"] == history

    at = svc.request("POST", path, content=padded(document, limit), headers=AUTH)
    assert at.status_code == status, at.text


def never(calls: list[str]) -> Any:
    """A receive that records that it was called, and has nothing to give."""

    async def receive() -> Message:
        calls.append("receive")
        return {"type": "http.disconnect"}

    return receive


@pytest.mark.parametrize(("path", "document", "setting", "status"), ENDPOINTS, ids=IDS)
def test_a_content_length_over_the_limit_is_refused_before_reading(
    default_svc: InProcessService, path: str, document: Any, setting: str, status: int
) -> None:
    limit = getattr(ServiceConfig(), setting)
    calls: list[str] = []
    headers = [
        (b"content-length", str(limit + 1).encode()),
        (b"authorization", f"Bearer {TOKEN}".encode()),
    ]
    sent = default_svc.call("POST", path, headers, never(calls))
    assert calls == []
    assert sent[0]["status"] == 413
    assert sent[1]["body"].startswith(b'{"error":{"field":"","reason":"the body is larger')


def test_a_route_that_reads_no_body_never_reads_one(default_svc: InProcessService) -> None:
    calls: list[str] = []
    for path in ("/v1/models", "/v1/health", "/v1/nowhere"):
        sent = default_svc.call("GET", path, [(b"content-length", b"999999999999")], never(calls))
        assert sent[0]["status"] in (200, 404)
    assert calls == []


@pytest.mark.parametrize(("path", "document", "setting", "status"), ENDPOINTS, ids=IDS)
def test_a_streamed_body_is_read_only_until_it_passes_the_limit(
    default_svc: InProcessService, path: str, document: Any, setting: str, status: int
) -> None:
    """Without a Content-Length, reading stops at the chunk that passes the limit."""
    limit = getattr(ServiceConfig(), setting)
    chunk = 4 * KIB
    crossing = limit // chunk + 1  # the chunk whose bytes pass the limit
    served: list[int] = []

    async def receive() -> Message:
        served.append(chunk)
        assert len(served) <= 2 * crossing, "the body is read on past its limit"
        return {"type": "http.request", "body": b" " * chunk, "more_body": True}

    sent = default_svc.call("POST", path, [(b"authorization", f"Bearer {TOKEN}".encode())], receive)
    assert sent[0]["status"] == 413
    assert len(served) == crossing


def test_the_documented_route_behind_no_fast_path_is_limited_too(redis_server: RedisServer) -> None:
    """``create_app`` alone (the route the OpenAPI page describes) holds the same limit."""
    settings = config(stream_url(redis_server.url), max_lookup_bytes=2 * KIB)

    async def post(size: int) -> httpx.Response:
        async with running(create_app(settings)) as client:
            return await client.post("/v1/lookup", content=padded(LOOKUP, size))

    assert asyncio.run(post(2 * KIB)).status_code == 200
    over = asyncio.run(post(2 * KIB + 1))
    assert over.status_code == 413
    assert_error_shape(over)


# --- the settings ---------------------------------------------------------------------------


def test_limits_come_from_the_file_and_flags_over_it(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    path = tmp_path / "windvane.toml"
    path.write_text("max_lookup_bytes = 4096\nmax_events_bytes = 8388608\n", encoding="utf-8")
    monkeypatch.setenv("WINDVANE_TOKEN", TOKEN)
    loaded = load_config(str(path), {"max_lookup_bytes": 2048, "max_model_bytes": None}).check()
    assert (loaded.max_lookup_bytes, loaded.max_events_bytes) == (2048, 8 * MIB)
    assert (loaded.max_openrtb_bytes, loaded.max_model_bytes) == (256 * KIB, 1 * MIB)
    # Several workers read their settings from the environment: the limits travel with them.
    monkeypatch.setenv(ENVIRONMENT_KEY, loaded.to_environment())
    assert ServiceConfig.from_environment() == loaded


@pytest.mark.parametrize("value", [0, 1023, 256 * MIB + 1, -1, "64k", 65536.0, True])
@pytest.mark.parametrize("setting", sorted(CONFIGURED))
def test_a_limit_out_of_range_refuses_to_start(setting: str, value: object) -> None:
    flag = "--" + setting.replace("_", "-")
    with pytest.raises(UsageError, match=f"^{flag} must be a whole number of bytes"):
        ServiceConfig(token=TOKEN, **{setting: value}).check()


def raw_post(port: int, path: str, headers: dict[str, str], body: bytes = b"") -> tuple[int, bytes]:
    """POST over a plain socket, so the Content-Length can claim more than is sent.

    The socket's timeout guards against a server that waits for the promised body.
    """
    head = f"POST {path} HTTP/1.1\r\nHost: 127.0.0.1\r\n"
    head += "".join(f"{name}: {value}\r\n" for name, value in headers.items()) + "\r\n"
    with socket.create_connection(("127.0.0.1", port), timeout=10) as sock:
        sock.sendall(head.encode() + body)
        data = b""
        while b"\r\n\r\n" not in data:
            data += sock.recv(65536)
        answer_head, _, rest = data.partition(b"\r\n\r\n")
        match = re.search(rb"(?i)content-length: (\d+)", answer_head)
        assert match is not None, answer_head
        while len(rest) < int(match.group(1)):
            rest += sock.recv(65536)
    return int(answer_head.split()[1]), rest


def test_serve_takes_the_limits_and_answers_a_huge_content_length_at_once(
    redis_server: RedisServer, tmp_path: Path
) -> None:
    settings = tmp_path / "windvane.toml"
    settings.write_text("max_model_bytes = 8192\n", encoding="utf-8")
    args = ("--store", "memory://", "--defs", str(FEATUREDEFS),
            "--stream", stream_url(redis_server.url), "--config", str(settings),
            "--max-lookup-bytes", "4096", "--deadline-ms", "2000")  # fmt: skip
    with ServiceProcess(*args, token=TOKEN) as svc:
        huge = {"Content-Type": "application/json", "Content-Length": "1000000000"}
        for path, headers in (("/v1/lookup", huge), ("/v1/models/m/snapshots", {**huge, **AUTH})):
            status, body = raw_post(svc.port, path, headers, b"{")
            assert status == 413, body
            assert body.startswith(b'{"error":{"field":"","reason":"the body is larger')
        status, _ = raw_post(svc.port, "/v1/models/m/snapshots", huge, b"{")
        assert status == 401  # the token is checked before the size
        with httpx.Client(base_url=svc.url, timeout=10) as client:
            assert client.post("/v1/lookup", content=padded(LOOKUP, 4096)).status_code == 200
            assert client.post("/v1/lookup", content=padded(LOOKUP, 4097)).status_code == 413
            snapshot = {**SNAPSHOT, "version": "v-limit"}
            over = client.post(
                "/v1/models/m/snapshots", content=padded(snapshot, 8193), headers=AUTH
            )
            assert over.status_code == 413
            at = client.post("/v1/models/m/snapshots", content=padded(snapshot, 8192), headers=AUTH)
            assert at.status_code == 201, at.text
