"""Whatever a client sends, the answer is below 500 and every error is in the documented shape.

A body of any shape or size (nested thousands deep, huge strings, lone surrogates as
``\\udfff`` escapes and as raw bytes, invalid UTF-8, wrong types, random bytes), on any
endpoint, with any query string, path parameter or method, is answered with a 2xx or a
4xx; every error answer is exactly ``{"error": {"field", "reason"}}``. The service runs
in-process as ``create_asgi`` builds it (the lookup fast path in front of the routes),
its lifespan run, on an embedded store with the stream on the fixture's redis-server.
"""

from __future__ import annotations

import copy
import json
from collections.abc import Iterator
from typing import Any
from urllib.parse import quote

import httpx
import orjson
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tests.in_process import InProcessService, Message
from tests.serving.request_bodies import (
    ACTIVATION,
    AUTH,
    BID_REQUEST,
    EVENTS,
    LOOKUP,
    SNAPSHOT,
    assert_error_shape,
    assert_rejections_shape,
    service,
)
from windvane.inputs.json_body import MAX_DEPTH
from windvane.serving.limits import BodyLimits

LIMITS = BodyLimits()


@pytest.fixture(scope="module")
def svc(redis_server) -> Iterator[InProcessService]:
    with service(redis_server.url) as running:
        yield running


def assert_answered(answer: httpx.Response, path: str) -> None:
    """Below 500; an error is in the documented shape (or the events endpoint's own list)."""
    assert answer.status_code < 500, (path, answer.status_code, answer.text[:300])
    if answer.status_code < 400:
        return
    if path.startswith("/v1/events") and answer.status_code == 422 and "rejected" in answer.json():
        assert_rejections_shape(answer)
    else:
        assert_error_shape(answer)


# --- what a client may send ------------------------------------------------------------------

# Any character, lone surrogates included (hypothesis leaves them out unless asked).
ANY_TEXT = st.text(st.characters(exclude_categories=()), max_size=12)
SCALARS = (
    st.none() | st.booleans() | st.integers() | st.floats() | ANY_TEXT
    | st.sampled_from(["", "\udfff", "\ud800x", "é", "{braces}", "a b", "x" * 300])
)  # fmt: skip
JSON_VALUES = st.recursive(
    SCALARS,
    lambda inner: st.lists(inner, max_size=4) | st.dictionaries(ANY_TEXT, inner, max_size=4),
    max_leaves=16,
)


# Stands for a member nested deeper than the test's own JSON encoder would recurse.
DEEP_MARK = "\x00deep\x00"


@st.composite
def nesting(draw: st.DrawFn) -> bytes:
    """JSON nested from around the limit to 200,000 levels: arrays, objects or both."""
    depth = draw(st.sampled_from([MAX_DEPTH - 1, MAX_DEPTH, 300, 1000, 5000, 100_000]))
    opener, closer = draw(st.sampled_from([(b"[", b"]"), (b'{"a":', b"}"), (b'[{"a":', b"}]")]))
    return opener * depth + b"1" + closer * depth


@st.composite
def encoded(draw: st.DrawFn, value: Any) -> bytes:
    """``value`` as JSON, surrogates as ``\\u`` escapes or as raw (invalid UTF-8) bytes."""
    escaped = json.dumps(value).encode()
    raw = json.dumps(value, ensure_ascii=False).encode("utf-8", "surrogatepass")
    body = draw(st.sampled_from([escaped, raw]))
    mark = json.dumps(DEEP_MARK).encode()
    return body.replace(mark, draw(nesting())) if mark in body else body


# Values that broke or could break a decoder, validator or encoder, drawn as often as the rest.
NASTY = st.sampled_from(["\udfff", "a\ud800b", "x" * 10_000, "", -1, 1e308, 2**64, None, [], {}])
REPLACEMENTS = st.one_of(st.just(DEEP_MARK), NASTY, JSON_VALUES)


def containers(document: Any) -> list[Any]:
    """Every object and array in ``document``, itself first."""
    found, stack = [], [document]
    while stack:
        node = stack.pop()
        if isinstance(node, dict | list):
            found.append(node)
            stack.extend(node.values() if isinstance(node, dict) else node)
    return found


@st.composite
def mutated(draw: st.DrawFn, template: Any) -> Any:
    """``template`` with one to three members of its objects or arrays replaced or added.

    An added member is one the endpoint does not know, where a value may pass every check
    and still reach an encoder (a stored snapshot's ``training``, an event's extra field).
    """
    document = copy.deepcopy(template)
    for _ in range(draw(st.integers(1, 3))):
        node = draw(st.sampled_from(containers(document)))
        value = copy.deepcopy(draw(REPLACEMENTS))  # NASTY's [] and {} are shared
        if isinstance(node, dict) and (not node or draw(st.booleans())):
            node[draw(st.sampled_from(["ext", "notes", "\udfff"]) | ANY_TEXT)] = value
        elif isinstance(node, dict):
            node[draw(st.sampled_from(sorted(node)))] = value
        elif node and draw(st.booleans()):
            node[draw(st.integers(0, len(node) - 1))] = value
        else:
            node.append(value)
    return document


@st.composite
def huge(draw: st.DrawFn) -> bytes:
    """A string member under, at, or over an endpoint's limit."""
    size = draw(st.sampled_from([1000, LIMITS.lookup, LIMITS.openrtb + 1, LIMITS.events + 8]))
    char = draw(st.sampled_from([b"x", b"\\udfff", b"\xed\xbf\xbf", b"\xff", b"\\\\"]))
    return b'{"id":"' + char * (size // len(char)) + b'","imp":[{"id":"1"}]}'


def bodies(template: Any) -> st.SearchStrategy[bytes]:
    return st.one_of(
        mutated(template).flatmap(encoded),
        mutated(template).flatmap(encoded),
        JSON_VALUES.flatmap(encoded),
        nesting(),
        huge(),
        st.binary(max_size=200),
        st.sampled_from([b"", b"null", b"[]", b"{}", b"\xef\xbb\xbf{}", b"\n\n", b'"\\udfff"']),
    )


# Model names as they stand in the path: percent-encoded, some of them on purpose oddly.
MODEL_NAMES = st.one_of(
    st.just("m"),
    st.text(st.characters(exclude_categories=("Cs",)), min_size=1, max_size=20).map(
        lambda name: quote(name, safe="")
    ),
    st.sampled_from(["%00", "%ED%BF%BF", "..", "a%2Fb", "M", "-", "x" * 300, "m;x", "%FF"]),
)
# Half the requests without a query and most with the token, so that bodies get read.
QUERIES = st.just({}) | st.dictionaries(
    st.sampled_from(["campaigns", "model", "activate", "x"]),
    st.text(st.characters(exclude_categories=("Cs",)), max_size=12),
    max_size=2,
)
HEADERS = st.fixed_dictionaries(
    {},
    optional={
        "content-type": st.sampled_from(
            ["application/json", "application/x-ndjson", "text/plain", "", "application/json; x"]
        ),
        "x-deadline-ms": st.sampled_from(["", "5", "-1", "1e309", "nan", "abc", "9" * 40]),
    },
).flatmap(lambda headers: st.sampled_from([headers, *[{**headers, **AUTH}] * 3]))
ANY_METHOD = "any"

# (method, path with {name} for the model, the valid body to start from)
ENDPOINTS = [
    ("POST", "/v1/lookup", LOOKUP),
    ("POST", "/v1/lookup/openrtb", BID_REQUEST),
    ("POST", "/v1/events", EVENTS),
    ("POST", "/v1/models/{name}/snapshots", SNAPSHOT),
    ("POST", "/v1/models/{name}/activate", ACTIVATION),
    ("POST", "/v1/models/{name}/rollback", {}),
    ("GET", "/v1/models", {}),
    ("GET", "/v1/models/{name}", {}),
    ("GET", "/v1/models/{name}/history", {}),
    ("GET", "/v1/health", {}),
    (ANY_METHOD, "/v1/nope", LOOKUP),
]


@st.composite
def requests(draw: st.DrawFn, method: str, path: str, template: Any) -> tuple[str, str, dict]:
    """(method, path, httpx keyword arguments) for one request to ``path``."""
    if method == ANY_METHOD:
        method = draw(st.sampled_from(["GET", "PUT", "DELETE", "PATCH", "POST", "OPTIONS"]))
        path = draw(st.sampled_from(["/", "/v1", "/v1/lookup", "/v1/nope", "/v1/models/{name}/x",
                                     "/v1/lookup/", "/docs", "/v1/events/"]))  # fmt: skip
    path = path.format(name=draw(MODEL_NAMES))
    options = {"params": draw(QUERIES), "content": draw(bodies(template)), "headers": draw(HEADERS)}
    return method, path, options


@pytest.mark.parametrize(
    ("method", "path", "template"), ENDPOINTS, ids=[f"{m} {p}" for m, p, _ in ENDPOINTS]
)
def test_any_request_is_answered_below_500_in_the_documented_shape(
    svc: InProcessService, method: str, path: str, template: Any
) -> None:
    # Scaled from the active profile: 100 examples per endpoint in CI, 1200 with "deep".
    @settings(max_examples=settings.default.max_examples * 4)
    @given(call=requests(method, path, template))
    def answered(call: tuple[str, str, dict[str, Any]]) -> None:
        sent_method, sent_path, options = call
        assert_answered(svc.request(sent_method, sent_path, **options), sent_path)

    answered()


# --- the cases that were 500s ----------------------------------------------------------------


def nested(depth: int) -> bytes:
    return b"[" * depth + b"]" * depth


@pytest.mark.parametrize(
    ("path", "status"),
    [
        ("/v1/lookup", 413),  # 200,000 bytes: over the lookup's limit before its depth counts
        ("/v1/lookup/openrtb", 422),
        ("/v1/events", 422),
        ("/v1/models/m/snapshots", 422),
        ("/v1/models/m/activate", 422),
    ],
)
def test_nesting_100000_deep_is_refused_in_our_shape(
    svc: InProcessService, path: str, status: int
) -> None:
    for body in (nested(100_000), b'{"x":' + nested(100_000) + b"}"):
        answer = svc.request("POST", path, content=body, headers=AUTH)
        assert answer.status_code == status, answer.text
        assert_answered(answer, path)  # the second, to /v1/events, is one unreadable line


@pytest.mark.parametrize("depth", [2000, 20_000])
def test_a_lookup_nested_too_deep_to_skip_is_a_422(svc: InProcessService, depth: int) -> None:
    """Within the size limit, nesting the decoder cannot skip is refused, not a crash."""
    body = b'{"user":"u","device":{"ext":' + nested(depth) + b"}}"
    answer = svc.request("POST", "/v1/lookup", content=body)
    assert answer.status_code == 422
    assert assert_error_shape(answer) == {
        "field": "",
        "reason": f"the JSON is nested deeper than {MAX_DEPTH} levels",
    }


def wrapped(depth: int) -> Any:
    """A JSON value nested exactly ``depth`` levels deep: objects around a number."""
    value: Any = 1
    for _ in range(depth):
        value = {"a": value}
    return value


@pytest.mark.parametrize(
    ("path", "document", "field"),
    [
        ("/v1/models/m/snapshots", lambda v: {**SNAPSHOT, "version": "deep", "training": v},
         "training"),
        ("/v1/models/m/activate", lambda v: {**ACTIVATION, "note": v}, "note"),
        ("/v1/lookup/openrtb", lambda v: {**BID_REQUEST, "ext": v}, "ext"),
    ],
)  # fmt: skip
def test_the_depth_limit_is_exact(
    svc: InProcessService, path: str, document: Any, field: str
) -> None:
    """A body nests at most MAX_DEPTH levels (the body itself is one): one more is a 422."""
    over = svc.request("POST", path, json=document(wrapped(MAX_DEPTH)), headers=AUTH)
    assert over.status_code == 422
    assert assert_error_shape(over) == {
        "field": field,
        "reason": f"is nested deeper than {MAX_DEPTH} levels",
    }
    at = svc.request("POST", path, json=document(wrapped(MAX_DEPTH - 1)), headers=AUTH)
    if at.status_code >= 400:  # refused for another reason (an unknown field), not its depth
        assert "nested" not in assert_error_shape(at)["reason"]
    if path.endswith("snapshots"):
        assert at.status_code == 201, at.text


def test_an_event_nested_too_deep_is_rejected_alone(svc: InProcessService) -> None:
    deep_event = {**EVENTS[0], "id": "deep-1", "ext": wrapped(MAX_DEPTH)}
    answer = svc.request("POST", "/v1/events", json=[EVENTS[1], deep_event], headers=AUTH)
    assert answer.status_code == 200
    reason = f"is nested deeper than {MAX_DEPTH} levels"
    assert answer.json() == {
        "accepted": 1,
        "rejected": [{"index": 1, "field": "ext", "reason": reason}],
    }
    lines = orjson.dumps(EVENTS[0]) + b"\n" + orjson.dumps(deep_event) + b"\n"
    answer = svc.request("POST", "/v1/events", content=lines, headers=AUTH)
    assert answer.json()["rejected"] == [{"index": 1, "field": "ext", "reason": reason}]


def snapshot_with_notes(notes: bytes, version: str) -> bytes:
    """The snapshot with ``notes`` (raw JSON string contents) as its free-text training notes."""
    body = json.dumps({**SNAPSHOT, "version": version, "training": {"notes": "NOTES"}})
    return body.encode().replace(b"NOTES", notes)


@pytest.mark.parametrize(
    ("notes", "field"),
    [
        (b"\\udfff", "training.notes"),  # a lone low surrogate, escaped
        (b"ok \\ud800 then", "training.notes"),  # a lone high surrogate, escaped
        (b"\xed\xbf\xbf", "training.notes"),  # as raw bytes, which the JSON reader lets by
        (b"\xff\xfe", ""),  # invalid UTF-8
    ],
)
def test_a_lone_surrogate_in_a_snapshot_is_a_422_and_nothing_is_stored(
    svc: InProcessService, notes: bytes, field: str
) -> None:
    """Refused at the edge (our choice over storing it escaped): nothing is published."""
    before = svc.request("GET", "/v1/models/m/history").json()["versions"]
    answer = svc.request(
        "POST", "/v1/models/m/snapshots", content=snapshot_with_notes(notes, "v-sur"), headers=AUTH
    )
    assert answer.status_code == 422
    assert assert_error_shape(answer)["field"] == field
    assert svc.request("GET", "/v1/models/m/history").json()["versions"] == before
    fresh = svc.request(
        "POST", "/v1/models/fresh/snapshots", content=snapshot_with_notes(notes, "v1"), headers=AUTH
    )
    assert fresh.status_code == 422
    assert svc.request("GET", "/v1/models/fresh/history").status_code == 404


def test_a_surrogate_pair_in_a_snapshot_is_kept(svc: InProcessService) -> None:
    """An escaped pair is one valid character (U+1F600), so the refusal above is no overreach."""
    answer = svc.request(
        "POST", "/v1/models/m/snapshots", content=snapshot_with_notes(b"\\ud83d\\ude00", "v-pair"),
        headers=AUTH,
    )  # fmt: skip
    assert answer.status_code == 201, answer.text
    stored = svc.request("GET", "/v1/models/m/history").json()["versions"]
    assert [v["version"] for v in stored][-1] == "v-pair"


@pytest.mark.parametrize(
    ("path", "body"),
    [
        ("/v1/lookup", b'{"user":"\\udfff"}'),
        ("/v1/lookup", b'{"device":{"ua":"\xed\xbf\xbf"}}'),
        ("/v1/lookup/openrtb", b'{"id":"\\udfff","imp":[{"id":"1"}]}'),
        ("/v1/models/m/activate", b'{"arms":[{"version":"\\udfff","weight":1}]}'),
        ("/v1/events", b'[{"kind":"request","ts":1,"id":"\\udfff"}]'),
    ],
)
def test_lone_surrogates_elsewhere_are_422s(svc: InProcessService, path: str, body: bytes) -> None:
    answer = svc.request("POST", path, content=body, headers=AUTH)
    assert answer.status_code == 422
    assert "valid JSON" in assert_error_shape(answer)["reason"]


@pytest.mark.parametrize(
    ("method", "path", "status"),
    [
        ("GET", "/v1/nope", 404),
        ("POST", "/", 404),
        ("PUT", "/v1/lookup", 405),
        ("GET", "/v1/lookup", 405),
        ("DELETE", "/v1/models/m", 405),
        ("GET", "/v1/models/m/activate", 405),
    ],
)
def test_unknown_paths_and_methods_answer_in_our_shape(
    svc: InProcessService, method: str, path: str, status: int
) -> None:
    answer = svc.request(method, path, content=b"{}")
    assert answer.status_code == status
    assert_error_shape(answer)
    if status == 405:
        assert answer.headers["allow"]


@pytest.mark.parametrize("name", ["%00", "%ED%BF%BF", "M", "x" * 100, "%25", "-", "a%20b"])
def test_odd_model_names_are_404s_or_422s_naming_the_model(
    svc: InProcessService, name: str
) -> None:
    for path in (f"/v1/models/{name}", f"/v1/models/{name}/history"):
        answer = svc.request("GET", path)
        assert answer.status_code == 404, (path, answer.text)
        assert assert_error_shape(answer)["field"] == "model"
    published = svc.request("POST", f"/v1/models/{name}/snapshots", json=SNAPSHOT, headers=AUTH)
    assert published.status_code == 422, published.text
    assert assert_error_shape(published)["field"] == "model"


@pytest.mark.parametrize(("method", "path"), [("POST", "/v1/lookup"), ("GET", "/v1/models")])
def test_a_fault_of_ours_is_a_500_in_the_same_shape_and_still_raised(
    svc: InProcessService, monkeypatch: pytest.MonkeyPatch, method: str, path: str
) -> None:
    """No client causes these, but a bug should not answer in another shape either."""
    state = svc.app.app.state.windvane

    def broken(*args: object) -> None:
        raise RuntimeError("a bug")

    monkeypatch.setattr(state.lookups, "lookup", broken)
    monkeypatch.setattr(state.registry, "models", broken)
    sent: list[Message] = []

    async def receive() -> Message:
        return {"type": "http.request", "body": orjson.dumps(LOOKUP), "more_body": False}

    with pytest.raises(RuntimeError, match="a bug"):  # for the server to log
        svc.call(method, path, [], receive, sent)
    assert sent[0]["status"] == 500
    assert orjson.loads(sent[1]["body"]) == {
        "error": {"field": "", "reason": "internal error: the service logged it"}
    }
