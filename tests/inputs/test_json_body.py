"""The nesting limit and the Unicode check for JSON from outside, against recursive references.

The references recurse (fine for the depths generated here) and use the standard
library's UTF-8 encoder; the functions under test walk without recursion.
"""

from __future__ import annotations

import json
from typing import Any

import pytest
from hypothesis import given
from hypothesis import strategies as st

from windvane.errors import BadEvent, BadRequest
from windvane.inputs.events import parse_event_line
from windvane.inputs.json_body import (
    DEPTH_REASON,
    MAX_DEPTH,
    depth_problem,
    loads,
    printable,
    text_problem,
)
from windvane.inputs.lookup_request import decode_lookup_body


def depth(value: Any) -> int:
    """Levels of nesting: 0 for a scalar, one more than its deepest member for a container."""
    if isinstance(value, dict):
        return 1 + max(map(depth, value.values()), default=0)
    if isinstance(value, list):
        return 1 + max(map(depth, value), default=0)
    return 0


def encodable(value: Any) -> bool:
    try:
        json.dumps(value, ensure_ascii=False).encode()
    except UnicodeEncodeError:
        return False
    return True


ANY_TEXT = st.text(st.characters(exclude_categories=()), max_size=6)
JSON = st.recursive(
    st.none() | st.booleans() | st.integers() | st.floats() | ANY_TEXT,
    lambda inner: st.lists(inner, max_size=3) | st.dictionaries(ANY_TEXT, inner, max_size=3),
    max_leaves=12,
)


@st.composite
def nested_json(draw: st.DrawFn) -> Any:
    """A JSON value inside 0 to 70 arrays or objects, so depths on both sides of the limit."""
    value = draw(JSON)
    for _ in range(draw(st.integers(0, 70))):
        value = [value] if draw(st.booleans()) else {draw(ANY_TEXT): value, "x": 1}
    return value


@given(nested_json())
def test_depth_problem_agrees_with_the_recursive_depth(value: Any) -> None:
    member = depth_problem(value)
    assert (member is None) == (depth(value) <= MAX_DEPTH)
    if member is not None:  # the named member holds the excess
        inner = value[int(member[1:-1])] if isinstance(value, list) else value[member]
        assert depth(inner) >= MAX_DEPTH


@given(nested_json())
def test_text_problem_finds_what_utf8_cannot_encode(value: Any) -> None:
    path = text_problem(value)
    assert (path is None) == encodable(value)


def test_text_problem_names_the_path() -> None:
    document = json.loads('{"a": {"b": ["x", "\\udfff"]}, "c": "\\ud800"}')
    assert text_problem(document) == "a.b[1]"
    assert text_problem(json.loads('{"ok": {"\\udfff": 1}}')) == "ok.\\udfff"
    assert text_problem("\udfff") == ""
    assert text_problem({"a": "é😀", "b": ["\U0001f600"]}) is None
    assert printable("a\udfffb") == "a\\udfffb"
    assert printable("é") == "é"


def test_loads_refuses_bad_and_deep_json_naming_the_member() -> None:
    assert loads(b'{"a": [1, {"b": null}]}', BadRequest) == {"a": [1, {"b": None}]}
    deep = b'{"ok": 1, "ext": ' + b"[" * MAX_DEPTH + b"]" * MAX_DEPTH + b"}"
    with pytest.raises(BadRequest) as refused:
        loads(deep, BadRequest)
    assert (refused.value.field, refused.value.reason) == ("ext", DEPTH_REASON)
    for body in (b"[" * 100_000, b'"\\udfff"', b"\xed\xbf\xbf", b"{", b""):
        with pytest.raises(BadRequest) as refused:
            loads(body, BadRequest)
        assert refused.value.field == ""
        assert refused.value.reason.startswith("the body is not valid JSON")


@pytest.mark.parametrize("levels", [1000, 5000, 100_000])
def test_typed_decoders_refuse_what_they_cannot_skip(levels: int) -> None:
    """An unknown member too deep for msgspec to skip was a RecursionError (issue 10)."""
    ext = b'{"a":' * levels + b"1" + b"}" * levels
    reason = f"the JSON is nested deeper than {MAX_DEPTH} levels"
    with pytest.raises(BadRequest) as refused:
        decode_lookup_body(b'{"user": "u", "device": {"ext": ' + ext + b"}}")
    assert (refused.value.field, refused.value.reason) == ("", reason)
    with pytest.raises(BadEvent) as rejected:
        parse_event_line(b'{"kind": "request", "ts": 1, "id": "a", "ext": ' + ext + b"}")
    assert (rejected.value.field, rejected.value.reason) == ("", reason)
