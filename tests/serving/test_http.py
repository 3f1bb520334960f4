"""The lookup service over real HTTP: uvicorn on a free port, a redis-server the fixture started."""

from __future__ import annotations

import asyncio
import time
from collections.abc import Iterator

import httpx
import pytest

from tests.conftest import FEATUREDEFS
from tests.in_process import running
from tests.service_process import ServiceProcess
from tests.support import GOOD_SNAPSHOT, engine_for, good_lines, wait_until
from windvane.engine import Engine
from windvane.ingest.rejects import RejectsFile
from windvane.ingest.replay import replay
from windvane.inputs.openrtb import lookups_from_bid_request
from windvane.models.scoring import Scorer
from windvane.models.snapshot import parse_snapshot
from windvane.serving.app import create_app, create_asgi
from windvane.serving.config import ServiceConfig

TOKEN = "test-token-7f3a"
AUTH = {"Authorization": f"Bearer {TOKEN}"}
NOW = round(time.time())


@pytest.fixture(scope="module")
def loaded(redis_server, tmp_path_factory: pytest.TempPathFactory) -> Iterator[Engine]:
    engine = engine_for(FEATUREDEFS, redis_server.url)
    engine.store.flush()
    log = tmp_path_factory.mktemp("log") / "log.jsonl"
    log.write_bytes(b"\n".join(good_lines(1500, seed=4)) + b"\n")
    with RejectsFile(log.with_suffix(".rejects")) as rejects:
        replay(engine, [str(log)], rejects)
    yield engine
    engine.store.flush()


@pytest.fixture(scope="module")
def service(loaded: Engine, redis_server) -> Iterator[ServiceProcess]:
    # A generous deadline: these tests check answers, not speed, on a possibly busy machine.
    args = ("--store", redis_server.url, "--defs", str(FEATUREDEFS), "--deadline-ms", "5000")
    with ServiceProcess(*args, token=TOKEN) as svc:
        yield svc


REQUESTS = [
    {"user": "user-3", "app": "app-1", "ts": NOW, "campaigns": ["camp-0", "camp-2"]},
    {
        "user": "user-7",
        "app": "app-2",
        "ts": NOW - 120,
        "slot": {"w": 320, "h": 50},
        "device": {"w": 1080, "h": 1920, "pxratio": 3},
        "geo": {"country": "DEU"},
    },
    {"user": "user-9", "app": "app-3", "ts": NOW, "campaigns": ["camp-1"], "device": {"lmt": 1}},
    {"app": "app-0", "ts": NOW},
    {"user": "never-seen", "ts": NOW, "campaigns": ["camp-0"], "coppa": 0},
]


def without_timing(answer: dict) -> dict:
    return {k: v for k, v in answer.items() if k != "elapsed_ms"}


@pytest.mark.parametrize("request_body", REQUESTS)
def test_http_lookup_equals_engine_lookup(
    service: ServiceProcess, loaded: Engine, request_body: dict
) -> None:
    answer = httpx.post(f"{service.url}/v1/lookup", json=request_body, timeout=5)
    assert answer.status_code == 200, answer.text
    body = answer.json()
    assert isinstance(body["elapsed_ms"], float)  # reported, not judged: speed is in bench/
    assert without_timing(body) == loaded.lookup(request_body)


def test_openrtb_lookup_answers_per_imp(service: ServiceProcess, loaded: Engine) -> None:
    # Modelled on OpenRTB 2.5 section 6.2.3 (Example 3, Mobile), trimmed to the fields read,
    # with a second imp and this test's own user and app.
    bid_request = {
        "id": "IxexyLDIIk",
        "imp": [
            {"id": "1", "banner": {"w": 728, "h": 90}},
            {"id": "2", "banner": {"w": 320, "h": 50}},
        ],
        "app": {"bundle": "app-1"},
        "device": {"ifa": "user-3", "os": "iOS", "w": 1536, "h": 2048, "pxratio": 2},
        "user": {"id": "ignored-when-ifa-present"},
    }
    answer = httpx.post(
        f"{service.url}/v1/lookup/openrtb",
        params={"campaigns": "camp-0,camp-1"},
        json=bid_request,
        timeout=5,
    )
    assert answer.status_code == 200, answer.text
    body = answer.json()
    assert body["id"] == "IxexyLDIIk"
    assert [imp["imp"] for imp in body["imps"]] == ["1", "2"]
    for (imp_id, request), imp in zip(
        lookups_from_bid_request(bid_request, ("camp-0", "camp-1")), body["imps"], strict=True
    ):
        direct = loaded.lookup(
            {
                "user": request.user,
                "app": request.app,
                "ts": imp["ts"],
                "campaigns": list(request.campaigns),
                "slot": {"w": request.slot.w, "h": request.slot.h},
                "device": {"ifa": "x", "os": "iOS", "w": 1536, "h": 2048, "pxratio": 2},
            }
        )
        assert {k: v for k, v in imp.items() if k not in ("elapsed_ms", "imp")} == direct
        assert imp_id == imp["imp"]


@pytest.mark.parametrize(
    ("body", "field"),
    [
        (b'{"user": 12}', "user"),
        (b'{"ts": "yesterday"}', "ts"),
        (b'{"campaigns": "camp-0"}', "campaigns"),
        (b'{"slot": {"w": "wide", "h": 50}}', "slot.w"),
        (b'{"deadline_ms": -1}', "deadline_ms"),
        (b'{"model": 3}', "model"),
        (b"[1, 2]", ""),
        (b"not json", ""),
    ],
)
def test_bad_lookups_are_422_naming_the_field(
    service: ServiceProcess, body: bytes, field: str
) -> None:
    answer = httpx.post(f"{service.url}/v1/lookup", content=body, timeout=5)
    assert answer.status_code == 422
    assert answer.json()["error"]["field"] == field
    assert answer.json()["error"]["reason"]


def test_openrtb_errors_and_unknown_model(service: ServiceProcess) -> None:
    missing_imp = httpx.post(f"{service.url}/v1/lookup/openrtb", json={"id": "x"}, timeout=5)
    assert (missing_imp.status_code, missing_imp.json()["error"]["field"]) == (422, "imp")
    unknown = httpx.post(f"{service.url}/v1/lookup", json={"model": "no-such"}, timeout=5)
    assert unknown.status_code == 404
    assert httpx.get(f"{service.url}/v1/models/no-such", timeout=5).status_code == 404


def test_publish_split_score_and_rollback_over_http(
    service: ServiceProcess, loaded: Engine
) -> None:
    url = service.url
    first = httpx.post(
        f"{url}/v1/models/http-ctr/snapshots",
        params={"activate": "true"},
        json=GOOD_SNAPSHOT,
        headers=AUTH,
        timeout=5,
    )
    assert first.status_code == 201, first.text
    second = {**GOOD_SNAPSHOT, "version": "v2", "intercept": -1.0}
    assert (
        httpx.post(
            f"{url}/v1/models/http-ctr/snapshots", json=second, headers=AUTH, timeout=5
        ).status_code
        == 201
    )
    split = httpx.post(
        f"{url}/v1/models/http-ctr/activate",
        headers=AUTH,
        timeout=5,
        json={"arms": [{"version": "v1", "weight": 90}, {"version": "v2", "weight": 10}]},
    )
    assert split.status_code == 200, split.text
    scorers = {
        "v1": Scorer(parse_snapshot(GOOD_SNAPSHOT), frozenset({"imps_1h"})),
        "v2": Scorer(parse_snapshot(second), frozenset({"imps_1h"})),
    }
    arms: dict[str, str] = {}
    with httpx.Client(timeout=5) as client:
        for n in range(400):
            request = {
                "user": f"user-{n}",
                "app": "app-1",
                "ts": NOW,
                "campaigns": ["camp-0"],
                "model": "http-ctr",
            }
            body = client.post(f"{url}/v1/lookup", json=request).json()
            version = body["model"]["version"]
            arms[request["user"]] = version
            expected = scorers[version].score(body["features"], body["campaigns"]["camp-0"])
            assert body["scores"]["camp-0"] == pytest.approx(expected, abs=1e-12)
    shares = sum(v == "v2" for v in arms.values()) / len(arms)
    assert 0.03 < shares < 0.2  # 10% of 400 users, loosely; the exact shares are tested offline
    again = httpx.post(
        f"{url}/v1/lookup",
        timeout=5,
        json={"user": "user-5", "app": "app-1", "ts": NOW, "model": "http-ctr"},
    ).json()
    assert again["model"]["version"] == arms["user-5"]
    coefficients = httpx.get(f"{url}/v1/models/http-ctr", timeout=5).json()
    assert [a["version"] for a in coefficients["arms"]] == ["v1", "v2"]
    assert coefficients["arms"][1]["snapshot"]["intercept"] == -1.0
    back = httpx.post(f"{url}/v1/models/http-ctr/rollback", headers=AUTH, timeout=5)
    assert back.status_code == 200
    assert [a["version"] for a in back.json()["active"]["arms"]] == ["v1"]
    body = httpx.post(
        f"{url}/v1/lookup", timeout=5, json={"user": "user-1", "ts": NOW, "model": "http-ctr"}
    ).json()
    assert body["model"]["version"] == "v1"
    history = httpx.get(f"{url}/v1/models/http-ctr/history", timeout=5).json()
    assert [v["version"] for v in history["versions"]] == ["v1", "v2"]


def test_activation_reaches_every_worker_within_a_second(redis_server, loaded: Engine) -> None:
    from windvane.models.registry import Arm, ModelRegistry
    from windvane.serving.state import feature_shapes

    registry = ModelRegistry(loaded.store, feature_shapes(loaded.plan))
    registry.publish("fleet", {**GOOD_SNAPSHOT, "version": "a"}, "test", activate=True)
    registry.publish("fleet", {**GOOD_SNAPSHOT, "version": "b"}, "test")
    with (
        ServiceProcess(
            "--store",
            redis_server.url,
            "--defs",
            str(FEATUREDEFS),
            "--workers",
            "2",
            "--read-only",
            "--deadline-ms",
            "5000",
        ) as svc,
        httpx.Client(base_url=svc.url, timeout=5) as client,
    ):
        request = {"ts": NOW, "model": "fleet"}
        assert {
            client.post("/v1/lookup", json=request).json()["model"]["version"] for _ in range(20)
        } == {"a"}
        registry.activate("fleet", [Arm("b", 100)], "test")

        def sample() -> tuple[set[str], set[int]]:
            """The versions answered and the workers that answered, over 60 lookups."""
            # Connection: close makes every request a new connection, spread over both workers.
            close = {"Connection": "close"}
            versions, pids = set(), set()
            for _ in range(60):
                answer = client.post("/v1/lookup", json=request, headers=close).json()
                versions.add(answer["model"]["version"])
                pids.add(client.get("/v1/health", headers=close).json()["pid"])
            return versions, pids

        def switched() -> bool:
            versions, pids = sample()
            return versions == {"b"} and len(pids) == 2

        # Every worker follows the activation within a second.
        wait_until(switched, timeout_s=1.0)
        versions, pids = sample()
        assert len(pids) == 2
        assert versions == {"b"}


def test_openapi_documents_every_endpoint(service: ServiceProcess) -> None:
    spec = httpx.get(f"{service.url}/openapi.json", timeout=5).json()
    paths = spec["paths"]
    for path in (
        "/v1/lookup",
        "/v1/lookup/openrtb",
        "/v1/models",
        "/v1/models/{name}",
        "/v1/models/{name}/snapshots",
        "/v1/models/{name}/activate",
        "/v1/models/{name}/rollback",
        "/v1/models/{name}/history",
        "/v1/health",
    ):
        assert path in paths, path
    body = paths["/v1/lookup"]["post"]["requestBody"]["content"]["application/json"]["schema"]
    assert body == {"$ref": "#/components/schemas/LookupBody"}
    schemas = spec["components"]["schemas"]
    for name in ("LookupBody", "LookupAnswer", "Snapshot", "Term", "ActivateBody", "ErrorBody"):
        assert name in schemas, name


def test_serve_replay_loads_the_embedded_store_before_listening(tmp_path) -> None:  # type: ignore[no-untyped-def]
    log = tmp_path / "log.jsonl"
    log.write_bytes(b"\n".join(good_lines(300, seed=12)) + b"\n")
    args = (
        "--store",
        "memory://",
        "--defs",
        str(FEATUREDEFS),
        "--replay",
        str(log),
        "--read-only",
        "--deadline-ms",
        "2000",
    )
    with ServiceProcess(*args) as svc:
        answer = httpx.post(
            f"{svc.url}/v1/lookup", json={"user": "user-3", "app": "app-1", "ts": NOW}, timeout=5
        ).json()
    expected = engine_for(FEATUREDEFS, "memory://serve-replay-check")
    with RejectsFile(tmp_path / "r.jsonl") as rejects:
        replay(expected, [str(log)], rejects)
    assert without_timing(answer) == expected.lookup({"user": "user-3", "app": "app-1", "ts": NOW})
    assert answer["features"]["session_depth"] is not None


def test_documented_route_answers_as_the_fast_path(loaded: Engine, redis_server) -> None:
    """The FastAPI route (which the OpenAPI page describes) and the ASGI fast path that
    serves the bidder must be one implementation: same bodies, same errors."""
    config = ServiceConfig(
        store=redis_server.url, defs=str(FEATUREDEFS), read_only=True, deadline_ms=5000
    )
    bad = [{"user": "a b"}, {"campaigns": "x"}, {"geo": {"country": "DE"}}, {"ts": "soon"}]

    async def compare() -> int:
        async with running(create_app(config)) as routed, running(create_asgi(config)) as fast:
            for body in [*REQUESTS, *bad]:
                one = await routed.post("/v1/lookup", json=body)
                two = await fast.post("/v1/lookup", json=body)
                assert one.status_code == two.status_code, body
                if one.status_code == 200:
                    assert without_timing(one.json()) == without_timing(two.json())
                else:
                    assert one.status_code == 422, one.text
                    assert one.json() == two.json()
        return len(REQUESTS) + len(bad)

    assert asyncio.run(compare()) == 9
