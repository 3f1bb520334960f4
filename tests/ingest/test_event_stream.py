"""POST /v1/events's batch check: each event is accepted or rejected alone."""

from __future__ import annotations

from typing import Any

from windvane.ingest.event_stream import prepare
from windvane.inputs.json_body import DEPTH_REASON


def test_an_event_nested_too_deep_is_rejected_alone() -> None:
    """Deeper than orjson re-encodes (254 levels), one event used to fail the whole POST."""
    good = {"kind": "request", "ts": 1_700_000_000, "id": "a", "user": "u"}
    deep: Any = 1
    for _ in range(300):
        deep = [deep]
    accepted, rejected = prepare([good, {**good, "ext": deep}], shards=4)
    assert len(accepted) == 1
    assert [r.to_dict() for r in rejected] == [{"index": 1, "field": "ext", "reason": DEPTH_REASON}]
