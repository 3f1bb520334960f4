"""The compiled plan: keys, the state each holds, the events touching it, how features are read.

Compiling once at start-up turns the definitions into flat lists that the update path
(per event) and the read path (per lookup) walk without looking anything up by name.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

from windvane.definitions.files import DefinitionSet, load_definitions
from windvane.durations import format_duration
from windvane.errors import DefinitionError
from windvane.inputs.events import EVENT_KINDS
from windvane.keys import KEY_FIELD_LETTERS
from windvane.kinds import KINDS
from windvane.kinds.base import BuildContext, Feature, FieldProblem, KeyedOptions, State

# Rough cost of one small Redis hash key (key string, object header, dictionary and
# expiry entries, listpack header). Recalled from memory of Redis internals; the
# memory benchmark measures the real figure.
KEY_OVERHEAD_BYTES = 80


@dataclass
class StoredState:
    """One state at one key_shape: the hash field it lives in and the features reading it."""

    field: str
    state: State
    features: list[Feature] = field(default_factory=list)


@dataclass
class KeyShape:
    """A kind of key, such as ``user`` or ``user+campaign``, and the state it holds."""

    fields: tuple[str, ...]
    expire_margin_s: int
    states: list[StoredState] = field(default_factory=list)

    @property
    def name(self) -> str:
        return "+".join(self.fields)

    @property
    def per_user(self) -> bool:
        return "user" in self.fields

    @property
    def per_campaign(self) -> bool:
        return "campaign" in self.fields

    @property
    def retention_s(self) -> int:
        return max(s.state.retention_s for s in self.states) + self.expire_margin_s

    #: Set once the plan is compiled: how long a key lives after its last event.
    ttl_ms: int = 0

    def max_bytes(self) -> int:
        return KEY_OVERHEAD_BYTES + sum(s.state.max_bytes(s.field) for s in self.states)


@dataclass
class Updater:
    """What one event kind does to one stored state."""

    key_shape: KeyShape
    field: str
    state: State
    skip_restricted: bool


@dataclass
class Plan:
    source: Path
    features: list[Feature]
    key_shapes: list[KeyShape]
    updaters: dict[str, list[Updater]]
    expire_margin_s: int

    def feature_names(self) -> list[str]:
        return [f.name for f in self.features]

    def describe(self) -> str:
        """The plan as text, for ``windvane check``."""
        out = [
            f"windvane plan for {self.source}: {len(self.features)} features, "
            f"{len(self.key_shapes)} keys, "
            f"retention margin {format_duration(self.expire_margin_s)}",
            "",
            "keys",
        ]
        for key_shape in self.key_shapes:
            out.append(
                f"  {key_shape.name:<16} kept {format_duration(key_shape.retention_s)} after"
                f" its last event, ~{key_shape.max_bytes()} B at most per key"
            )
            for stored in key_shape.states:
                names = ", ".join(f.name for f in stored.features)
                out.append(f"    field {stored.field:<5} {stored.state.describe()}  <- {names}")
                note = stored.state.side_keys_note()
                if note:
                    out.append(f"                {note}")
        out += ["", "events"]
        for kind in EVENT_KINDS:
            targets = [f"{u.key_shape.name}.{u.field}" for u in self.updaters.get(kind, [])]
            out.append(f"  {kind:<11} -> {', '.join(targets) if targets else '(nothing)'}")
        out += ["", "features"]
        for feature in self.features:
            where = "request" if feature.state is None else "+".join(feature.key_fields)
            out.append(f"  {feature.name:<18} {feature.kind:<16} {where:<14} {feature.describe()}")
        restricted = [s.name for s in self.key_shapes if s.per_user]
        out += [
            "",
            "privacy: events with device.lmt=1 or coppa=1 leave no state under "
            f"{', '.join(restricted) or '(no per-user keys)'} and no user in distinct counts; "
            "lookups for them return no per-user features",
        ]
        return "\n".join(out)


def compile_plan(definitions: DefinitionSet) -> Plan:
    """Build every feature and lay out its state, or raise DefinitionError listing all mistakes."""
    margin_s = definitions.settings.expire_margin
    context = BuildContext(str(definitions.directory), margin_s)
    problems: list[str] = []
    features: list[Feature] = []
    key_shapes: dict[tuple[str, ...], KeyShape] = {}
    for definition in definitions.definitions:
        options = definition.options
        label = f"{definition.path}: feature {options.name!r}"
        try:
            feature = KINDS[options.kind].build(options, context)
            if feature.state is not None:
                if not isinstance(options, KeyedOptions):
                    raise TypeError(f"kind {options.kind} keeps state but has no key option")
                feature.key_fields = _parse_key(options.key)
        except FieldProblem as exc:
            problems.append(f"{label}: field {exc.field!r}: {exc.reason}")
            continue
        features.append(feature)
        if feature.state is not None:
            key_shape = key_shapes.get(feature.key_fields)
            if key_shape is None:
                key_shape = key_shapes[feature.key_fields] = KeyShape(feature.key_fields, margin_s)
            _place(key_shape, feature, feature.state)
    if problems:
        raise DefinitionError(problems)
    updaters: dict[str, list[Updater]] = {}
    for key_shape in key_shapes.values():
        key_shape.ttl_ms = key_shape.retention_s * 1000
        for stored in key_shape.states:
            skip = key_shape.per_user or stored.state.identifies_user
            for kind in sorted(stored.state.events):
                updaters.setdefault(kind, []).append(
                    Updater(key_shape, stored.field, stored.state, skip)
                )
    return Plan(definitions.directory, features, list(key_shapes.values()), updaters, margin_s)


def load_plan(directory: str | Path) -> Plan:
    return compile_plan(load_definitions(directory))


def _parse_key(text: str) -> tuple[str, ...]:
    parts = tuple(text.split("+"))
    for part in parts:
        if part not in KEY_FIELD_LETTERS:
            raise FieldProblem(
                "key",
                f"{part!r} is not a key field: combine {', '.join(KEY_FIELD_LETTERS)} with +, "
                "such as user+campaign",
            )
    if len(set(parts)) != len(parts):
        raise FieldProblem("key", f"{text!r} names a field twice")
    return parts


def _place(key_shape: KeyShape, feature: Feature, state: State) -> None:
    """Share a stored field with an equal state, or give the state a new field id.

    Equal signatures mean equal layout and update, so the feature keeps its own state
    object for reading while the first one of the signature does the updating.
    """
    for stored in key_shape.states:
        if stored.state.signature == state.signature:
            stored.features.append(feature)
            return
    taken = {s.field for s in key_shape.states}
    length = 3
    field_id = State.field_id(key_shape.name, state.signature, length)
    while field_id in taken:
        length += 1
        field_id = State.field_id(key_shape.name, state.signature, length)
    key_shape.states.append(StoredState(field_id, state, [feature]))
