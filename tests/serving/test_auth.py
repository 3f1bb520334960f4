"""Write protection: every write without the right bearer token is a 401 and changes nothing."""

from __future__ import annotations

import os
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path

import httpx
import pytest

from tests.conftest import FEATUREDEFS, ROOT
from tests.in_process import InProcessService
from tests.service_process import ServiceProcess
from tests.serving.request_bodies import AUTH as REQUEST_AUTH
from tests.serving.request_bodies import assert_error_shape, service
from tests.support import GOOD_SNAPSHOT
from windvane.errors import UsageError
from windvane.models.registry import ModelRegistry
from windvane.serving.config import ServiceConfig, load_config
from windvane.serving.limits import DEFAULT_MAX_EVENTS_BYTES
from windvane.store import open_store

TOKEN = "s3cret-token"


def registry_state(url: str) -> tuple:
    store = open_store(url)
    models = ModelRegistry(store, {})
    return tuple((m, models.history(m), models.active(m), models.audit(m)) for m in models.models())


WRITES = [
    ("post", "/v1/models/ctr/snapshots", {**GOOD_SNAPSHOT, "version": "v9"}),
    ("post", "/v1/models/ctr/snapshots?activate=true", {**GOOD_SNAPSHOT, "version": "v9"}),
    ("post", "/v1/models/ctr/activate", {"arms": [{"version": "v1", "weight": 1}]}),
    ("post", "/v1/models/ctr/rollback", None),
]


BAD_HEADERS = [
    {},
    {"Authorization": "Bearer wrong"},
    {"Authorization": f"Basic {TOKEN}"},
    {"Authorization": f"Bearer {TOKEN}x"},
    {"Authorization": "Bearer"},
    {"Authorization": TOKEN},
]


def test_writes_without_the_token_are_refused(redis_server) -> None:
    open_store(redis_server.url).flush()
    with ServiceProcess(
        "--store", redis_server.url, "--defs", str(FEATUREDEFS), token=TOKEN
    ) as svc:
        good = {"Authorization": f"Bearer {TOKEN}"}
        created = httpx.post(
            f"{svc.url}/v1/models/ctr/snapshots", json=GOOD_SNAPSHOT, headers=good, timeout=5
        )
        assert created.status_code == 201
        before = registry_state(redis_server.url)
        for headers in BAD_HEADERS:
            for method, path, body in WRITES:
                answer = httpx.request(
                    method, f"{svc.url}{path}", json=body, headers=headers, timeout=5
                )
                assert answer.status_code == 401, (path, headers, answer.text)
                assert answer.headers["www-authenticate"] == "Bearer"
                assert answer.json()["error"]["field"] == "authorization"
        assert registry_state(redis_server.url) == before
        # Lookups and reads stay open.
        assert httpx.get(f"{svc.url}/v1/models", timeout=5).status_code == 200


def test_read_only_service_refuses_every_write(redis_server) -> None:
    open_store(redis_server.url).flush()
    with ServiceProcess(
        "--store", redis_server.url, "--defs", str(FEATUREDEFS), "--read-only"
    ) as svc:
        for method, path, body in WRITES:
            answer = httpx.request(
                method,
                f"{svc.url}{path}",
                json=body,
                timeout=5,
                headers={"Authorization": f"Bearer {TOKEN}"},
            )
            assert answer.status_code == 401
        assert registry_state(redis_server.url) == ()


def test_refuses_to_start_with_writes_and_no_token() -> None:
    env = {k: v for k, v in os.environ.items() if k != "WINDVANE_TOKEN"}
    env["PYTHONPATH"] = str(ROOT / "service")
    done = subprocess.run(
        [sys.executable, "-m", "windvane", "serve", "--defs", str(FEATUREDEFS)],
        env=env,
        capture_output=True,
        timeout=60,
    )
    assert done.returncode == 2
    assert done.stderr.decode().startswith(
        "windvane: refusing to start: write endpoints are enabled"
    )
    assert b"Traceback" not in done.stderr


# --- a token no request can carry; the token before the body ---------------------------------

UNSENDABLE = [
    ("   ", "only whitespace"),
    ("\t\n ", "only whitespace"),
    (" s3cret", "printable ASCII without leading or trailing whitespace"),
    ("s3cret\n", "printable ASCII without leading or trailing whitespace"),
    ("s3crét", "printable ASCII without leading or trailing whitespace"),
    ("s3\x00cret", "printable ASCII without leading or trailing whitespace"),
]


@pytest.mark.parametrize(("token", "reason"), UNSENDABLE)
def test_a_token_no_request_can_send_refuses_to_start(token: str, reason: str) -> None:
    with pytest.raises(UsageError, match=f"^refusing to start: .*{reason}"):
        ServiceConfig(token=token).check()
    # Without writes, or with writes open on purpose, the token is not used.
    assert ServiceConfig(token=token, read_only=True).check().token == token
    assert ServiceConfig(token=token, insecure_dev=True).check().token == token


def test_a_blank_token_from_the_environment_or_the_file_refuses_to_start(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setenv("WINDVANE_TOKEN", "  ")
    with pytest.raises(UsageError, match="token is only whitespace"):
        load_config(None, {}).check()
    monkeypatch.delenv("WINDVANE_TOKEN")
    settings = tmp_path / "windvane.toml"
    settings.write_text('token = " \\t "\n', encoding="utf-8")
    with pytest.raises(UsageError, match="token is only whitespace"):
        load_config(str(settings), {}).check()


def serve(env_token: str | None, *args: str) -> subprocess.CompletedProcess[bytes]:
    env = {k: v for k, v in os.environ.items() if k != "WINDVANE_TOKEN"}
    env["PYTHONPATH"] = str(ROOT / "service")
    if env_token is not None:
        env["WINDVANE_TOKEN"] = env_token
    command = [sys.executable, "-m", "windvane", "serve", "--defs", str(FEATUREDEFS), *args]
    return subprocess.run(command, env=env, capture_output=True, timeout=60)


def test_serve_refuses_a_whitespace_token_with_a_clear_message(tmp_path: Path) -> None:
    settings = tmp_path / "windvane.toml"
    settings.write_text('token = "   "\n', encoding="utf-8")
    for done in (serve(" \t "), serve(None, "--config", str(settings))):
        assert done.returncode == 2
        assert done.stderr.decode().startswith(
            "windvane: refusing to start: write endpoints are enabled but the token is only "
            "whitespace, which no request can send."
        )
        assert b"Traceback" not in done.stderr


@pytest.fixture(scope="module")
def in_process(redis_server) -> Iterator[InProcessService]:  # type: ignore[no-untyped-def]
    with service(redis_server.url) as svc:
        yield svc


MALFORMED = [
    b"not json",
    b"\xff\xfe",
    b"[" * 100_000 + b"]" * 100_000,
    b'{"arms": 5, "version": {"x": "\\udfff"}}',
    b'{"arms": [{"version": "v1", "weight": -1}], "extra": 1}',
    b" " * (DEFAULT_MAX_EVENTS_BYTES + 1),
]
WRITE_PATHS = [
    "/v1/models/m/snapshots",
    "/v1/models/m/snapshots?activate=true",
    "/v1/models/m/activate",
    "/v1/models/m/rollback",
    "/v1/events",
]


@pytest.mark.parametrize("path", WRITE_PATHS)
def test_a_bad_body_without_the_token_is_a_401_never_a_422(
    in_process: InProcessService, path: str
) -> None:
    """The token is checked before the body is read: a stranger learns nothing about it."""
    history = in_process.request("GET", "/v1/models/m/history").json()
    for body in MALFORMED:
        for headers in BAD_HEADERS:
            answer = in_process.request(
                "POST", path, content=body, headers={**headers, "Content-Type": "application/json"}
            )
            assert answer.status_code == 401, (path, body[:30], headers, answer.text)
            assert assert_error_shape(answer)["field"] == "authorization"
        with_token = in_process.request("POST", path, content=body, headers=REQUEST_AUTH)
        if not path.endswith("rollback"):  # rollback reads no body: its answer is its own
            assert with_token.status_code in (413, 422), (path, body[:30], with_token.text)
    assert in_process.request("GET", "/v1/models/m/history").json() == history
