"""The documented lookup body and the decoder the fast path uses agree on every limit.

The OpenAPI document's lookup schema is generated from the decoder's own types, so
they cannot drift apart; this test holds that promise from the outside: it reads each
limit from the schema a client sees (JSON Schema keywords maxLength, maxItems,
minimum, maximum, exclusiveMinimum) and sends the decoder a body at the limit, which
must be accepted, and one just past it, which must be refused naming that field.
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

import orjson
import pytest

from windvane.errors import BadRequest
from windvane.inputs.deadline import MAX_DEADLINE_MS
from windvane.inputs.lookup_request import MAX_CAMPAIGNS, decode_lookup_body
from windvane.inputs.rtb_objects import MAX_ID_LENGTH
from windvane.serving.app import create_app
from windvane.serving.config import ServiceConfig
from windvane.serving.schema import LOOKUP_BODY

REF = "#/components/schemas/"


@pytest.fixture(scope="module")
def components() -> dict[str, Any]:
    document = create_app(ServiceConfig(insecure_dev=True)).openapi()
    body = document["paths"]["/v1/lookup"]["post"]["requestBody"]
    assert body["content"]["application/json"]["schema"] == {"$ref": REF + LOOKUP_BODY}
    return document["components"]["schemas"]


def _branches(schema: dict[str, Any]) -> list[dict[str, Any]]:
    return [s for s in schema.get("anyOf", [schema]) if s.get("type") != "null"]


def _valid(schema: dict[str, Any], components: dict[str, Any]) -> Any:
    """A value every branch-one reader accepts, for the required neighbours of a field."""
    branch = _branches(schema)[0]
    if "$ref" in branch:
        target = components[branch["$ref"].removeprefix(REF)]
        return {n: _valid(target["properties"][n], components) for n in target.get("required", [])}
    return {"number": 1, "integer": 1, "string": "x", "array": []}[branch["type"]]


def limits(components: dict[str, Any]) -> Iterator[tuple[str, Any, Any]]:
    """(dotted field, a body at the limit, a body just past it) for every documented limit."""

    def walk(name: str, path: tuple[str, ...]) -> Iterator[tuple[tuple[str, ...], Any, Any]]:
        schema = components[name]
        for field, prop in schema["properties"].items():
            for branch in _branches(prop):
                here = (*path, field)
                if "$ref" in branch:
                    yield from walk(branch["$ref"].removeprefix(REF), here)
                    continue
                if "maxLength" in branch:
                    n = branch["maxLength"]
                    yield here, "x" * n, "x" * (n + 1)
                if "maxItems" in branch:
                    n = branch["maxItems"]
                    yield here, [f"c{i}" for i in range(n)], [f"c{i}" for i in range(n + 1)]
                if "maximum" in branch:
                    yield here, branch["maximum"], branch["maximum"] + 1
                if "minimum" in branch:
                    yield here, branch["minimum"], branch["minimum"] - 1
                if "exclusiveMinimum" in branch:
                    yield here, branch["exclusiveMinimum"] + 0.5, branch["exclusiveMinimum"]

    for path, at, past in walk(LOOKUP_BODY, ()):
        yield ".".join(path), _body(components, path, at), _body(components, path, past)


def _body(components: dict[str, Any], path: tuple[str, ...], value: Any) -> dict[str, Any]:
    """A lookup body with ``value`` at ``path`` and valid required neighbours around it."""
    body: dict[str, Any] = {}
    node, schema = body, components[LOOKUP_BODY]
    for step in path[:-1]:
        ref = next(b["$ref"] for b in _branches(schema["properties"][step]) if "$ref" in b)
        schema = components[ref.removeprefix(REF)]
        node[step] = {
            n: _valid(schema["properties"][n], components) for n in schema.get("required", [])
        }
        node = node[step]
    node[path[-1]] = value
    return body


def test_every_documented_limit_is_the_enforced_one(components: dict[str, Any]) -> None:
    found = list(limits(components))
    fields = {field for field, _, _ in found}
    # The limits written in the code, each of which the document must carry.
    assert {"user", "app", "campaigns", "deadline_ms", "geo.lat", "slot.w"} <= fields
    for field, at, past in found:
        decode_lookup_body(orjson.dumps(at))
        with pytest.raises(BadRequest) as refused:
            decode_lookup_body(orjson.dumps(past))
        assert refused.value.field.split("[")[0] == field, (field, refused.value)


def test_the_document_states_the_code_limits(components: dict[str, Any]) -> None:
    props = components[LOOKUP_BODY]["properties"]
    assert props["campaigns"]["maxItems"] == MAX_CAMPAIGNS
    assert props["campaigns"]["items"]["maxLength"] == MAX_ID_LENGTH
    assert [b.get("maxLength") for b in _branches(props["user"])] == [MAX_ID_LENGTH]
    assert [b.get("maximum") for b in _branches(props["deadline_ms"])] == [MAX_DEADLINE_MS]
