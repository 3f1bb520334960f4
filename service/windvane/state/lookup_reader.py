"""The read path: one lookup request in, one feature object out, one store round trip between.

``prepare`` lists the commands (one HGETALL per key the request can read, plus one
PFCOUNT per distinct count); the caller runs them in one pipeline, synchronously or
not; ``answer`` turns the replies and the request into features. The CLI, the HTTP
service and the tests share these two functions, so a value is computed one way only.
"""

from __future__ import annotations

from typing import Any

from windvane.definitions.plan import KeyShape, Plan
from windvane.inputs.lookup_request import LookupRequest
from windvane.keys import KeyLayout
from windvane.kinds.base import State


class _Missing:
    """Stands in for the reply of a command the store did not answer in time."""

    def __repr__(self) -> str:
        return "MISSING"


MISSING: Any = _Missing()
_EMPTY: dict[bytes, bytes] = {}


class PreparedLookup:
    __slots__ = ("cacheable", "commands", "reads", "request", "t_ms")

    def __init__(self, request: LookupRequest) -> None:
        self.request = request
        self.t_ms = round(request.ts_s * 1000)
        self.commands: list[tuple[Any, ...]] = []
        # Per command: True when it reads no per-user state, so a short-lived cache may answer.
        self.cacheable: list[bool] = []
        # (key shape, campaign or None, index of the HGETALL or -1, {field: index of its command})
        self.reads: list[tuple[KeyShape, str | None, int, dict[str, int]]] = []


class _KeyShapeRead:
    """What a lookup reads for one kind of key, worked out once from the plan."""

    __slots__ = (
        "fields", "has_hash", "key_shape", "name_key", "needs_app", "per_campaign", "per_user",
        "side",
    )  # fmt: skip

    def __init__(self, key_shape: KeyShape, layout: KeyLayout) -> None:
        self.key_shape = key_shape
        self.fields = key_shape.fields
        self.name_key = layout.state_key_format(key_shape.fields).format
        self.per_user = key_shape.per_user
        self.per_campaign = key_shape.per_campaign
        self.needs_app = "app" in key_shape.fields
        self.has_hash = any(s.state.in_hash for s in key_shape.states)
        self.side = [s for s in key_shape.states if not s.state.in_hash]


class LookupReader:
    def __init__(self, plan: Plan, layout: KeyLayout) -> None:
        self.plan = plan
        self.layout = layout
        self._shapes = [_KeyShapeRead(key_shape, layout) for key_shape in plan.key_shapes]
        # The answer's shape, worked out once: request-time features, and the names of
        # the shared and per-candidate ones in plan order, stored ones null until read.
        self._request_time = [f for f in plan.features if f.state is None]
        self._shared_names = [f.name for f in plan.features if "campaign" not in f.key_fields]
        self._stored_per_campaign = [
            f.name for f in plan.features if f.state is not None and "campaign" in f.key_fields
        ]
        # Per key shape: (hash field as bytes, field name, (feature name, read) it feeds).
        self._readers = {
            id(key_shape): [
                (stored.field.encode(), stored.field, [(f.name, f.read) for f in stored.features])
                for stored in key_shape.states
            ]
            for key_shape in plan.key_shapes
        }
        # Side-key commands (a distinct count's bucket keys) change once per bucket.
        self._side_commands: dict[tuple[str, str, int], tuple[Any, ...]] = {}

    def prepare(self, request: LookupRequest) -> PreparedLookup:
        lookup = PreparedLookup(request)
        commands, cacheable, reads = lookup.commands, lookup.cacheable, lookup.reads
        no_user = request.user is None or request.restricted
        for read in self._shapes:
            if (read.per_user and no_user) or (read.needs_app and request.app is None):
                continue
            shared = not read.per_user
            for campaign in request.campaigns if read.per_campaign else (None,):
                values = tuple(
                    request.user if name == "user" else request.app if name == "app" else campaign
                    for name in read.fields
                )
                key = read.name_key(*values)
                index = -1
                if read.has_hash:
                    index = len(commands)
                    commands.append(("HGETALL", key))
                    cacheable.append(shared)
                side: dict[str, int] = {}
                for stored in read.side:
                    side[stored.field] = len(commands)
                    commands.append(
                        self._side_command(stored.state, key, stored.field, lookup.t_ms)
                    )
                    cacheable.append(shared)
                reads.append((read.key_shape, campaign, index, side))
        return lookup

    def _side_command(self, state: State, key: str, field: str, t_ms: int) -> tuple[Any, ...]:
        slot = (key, field, t_ms // state.read_period_ms)
        command = self._side_commands.get(slot)
        if command is None:
            if len(self._side_commands) > 50_000:
                self._side_commands.clear()
            command = self._side_commands[slot] = state.read_command(key, field, t_ms)
        return command

    def answer(self, lookup: PreparedLookup, replies: list[Any] | None) -> dict[str, Any]:
        """The feature object from the replies, in command order.

        ``replies`` None, or a reply that is ``MISSING``, means the store did not answer
        in time: those stored features are null and ``stored`` says ``missing``.
        """
        request, t_ms = lookup.request, lookup.t_ms
        shared: dict[str, Any] = dict.fromkeys(self._shared_names)
        for feature in self._request_time:
            shared[feature.name] = feature.read_request(request)
        per_campaign: dict[str, dict[str, Any]] = {
            c: dict.fromkeys(self._stored_per_campaign) for c in request.campaigns
        }
        missing = replies is None
        if replies is not None:
            readers = self._readers
            for key_shape, campaign, index, side in lookup.reads:
                stored_hash = replies[index] if index >= 0 else _EMPTY
                target = shared if campaign is None else per_campaign[campaign]
                for field_bytes, field, features in readers[id(key_shape)]:
                    if side and field in side:
                        raw = replies[side[field]]
                    elif stored_hash is MISSING:
                        raw = MISSING
                    else:
                        raw = stored_hash.get(field_bytes)
                    if raw is MISSING:
                        missing = True
                        continue
                    for name, read in features:
                        target[name] = read(raw, t_ms)
        return {
            "ts": request.ts_s,
            "user": request.user,
            "app": request.app,
            "restricted": request.restricted,
            "stored": "missing" if missing else "ok",
            "features": shared,
            "campaigns": per_campaign,
        }
