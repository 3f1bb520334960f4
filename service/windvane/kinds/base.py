"""What a feature kind provides: its options, its stored state and how a value is read.

A kind is one module: an options model (what a definition may say), a ``State`` (the
stored layout, the update applied per event, and its Lua handler, the one place the
update arithmetic lives) and a ``Feature`` (the read, the one place the read arithmetic
lives). Request-time kinds have no state and read only the lookup request.
"""

from __future__ import annotations

import hashlib
from abc import ABC, abstractmethod
from dataclasses import dataclass
from typing import Annotated, Any, ClassVar

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field

from windvane.durations import format_duration, parse_duration_s
from windvane.inputs.events import EVENT_KINDS, Event
from windvane.inputs.lookup_request import LookupRequest
from windvane.kinds.batch_writes import BatchWrites

DurationS = Annotated[int, BeforeValidator(parse_duration_s)]
KeyName = Annotated[str, Field(pattern=r"^[a-z+]+$")]


# A Lua ``decode`` body for states stored as three numbers, ``a:b:c``.
DECODE_THREE_NUMBERS = """
if not s then return nil end
local p = string.find(s, ':', 1, true)
local q = string.find(s, ':', p + 1, true)
return {tonumber(string.sub(s, 1, p - 1)), tonumber(string.sub(s, p + 1, q - 1)),
        tonumber(string.sub(s, q + 1))}
"""


@dataclass(frozen=True)
class LuaHandler:
    """One update operation in Lua, in three parts, so a field is parsed once per call.

    ``arity`` counts the operation's arguments, the first always the hash field.
    ``decode`` is the body of ``function(s)``: the stored string (false when absent) to a
    Lua value. ``apply`` is the body of ``function(v, a, i)``: returns the new value and
    whether it changed; ``a`` is ARGV and ``a[i]`` the field. ``encode`` is the body of
    ``function(v)``: the value back to its canonical stored string.
    """

    arity: int
    decode: str
    apply: str
    encode: str


class FieldProblem(ValueError):
    """A definition value that is well-formed but does not make sense; names its field."""

    def __init__(self, field: str, reason: str) -> None:
        self.field = field
        self.reason = reason
        super().__init__(reason)


class Options(BaseModel):
    """Fields every definition has; each kind extends it with its own."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    name: Annotated[str, Field(pattern=r"^[a-z][a-z0-9_]{0,62}$")]
    kind: str
    description: str = ""


class KeyedOptions(Options):
    """Options of a kind that keeps state under a key such as ``user`` or ``user+campaign``."""

    key: KeyName


class BuildContext:
    """What the compiler lends a kind while it builds: where the file is, the retention margin."""

    def __init__(self, source_dir: str, expire_margin_s: int) -> None:
        self.source_dir = source_dir
        self.expire_margin_s = expire_margin_s


class State(ABC):
    """The stored state of one or more features at one key: layout, update and Lua handler.

    Two features whose states have equal ``signature`` share one stored field (for
    example session depth and session length). The field id is derived from the
    signature, so changing a definition's parameters never misreads old state.
    """

    #: Opcode -> its Lua handler, run by the update script (see ``windvane.state.update_script``).
    LUA_HANDLERS: ClassVar[dict[str, LuaHandler]] = {}

    events: frozenset[str]
    retention_s: int
    #: True when the state holds who a person is (a user id), so restricted events must skip it.
    identifies_user: bool = False
    #: False for a state kept in side keys of its own rather than as a field of the key's hash.
    in_hash: ClassVar[bool] = True

    @property
    @abstractmethod
    def signature(self) -> str: ...

    @abstractmethod
    def update(self, event: Event, key: str, field: str, writes: BatchWrites) -> None:
        """Add this event's effect on the state stored at ``key`` / ``field`` to ``writes``."""

    @abstractmethod
    def max_bytes(self, field: str) -> int:
        """Rough upper bound of the stored bytes of this state under one key."""

    #: For a state read by its own command: the command is the same for every lookup time
    #: within one period of this many milliseconds (so the read path may reuse it).
    read_period_ms: int = 1

    def read_command(self, key: str, field: str, t_ms: int) -> tuple[Any, ...] | None:
        """An extra store command whose answer is this state's raw value, or None.

        None (the default) means the state is a field of the key's hash, read with the
        hash in the lookup's one round trip.
        """
        return None

    def side_keys_note(self) -> str:
        return ""

    def describe(self) -> str:
        return self.signature

    @staticmethod
    def field_id(scope: str, signature: str, length: int = 3) -> str:
        digest = hashlib.blake2b(f"{scope}|{signature}".encode(), digest_size=8).digest()
        number = int.from_bytes(digest, "big")
        alphabet = "0123456789abcdefghijklmnopqrstuvwxyz"
        chars = []
        for _ in range(length):
            number, rest = divmod(number, 36)
            chars.append(alphabet[rest])
        return "".join(chars)


class Feature(ABC):
    """One named value of the lookup answer."""

    kind: ClassVar[str]
    options: Options
    state: State | None = None
    #: The key fields of a stateful feature, such as ("user", "campaign").
    key_fields: tuple[str, ...] = ()

    def __init__(self, options: Options) -> None:
        self.options = options
        self.name: str = options.name

    def read(self, raw: Any, t_ms: int) -> float | int | None:
        """The value from the state's raw stored value (None when nothing is stored)."""
        raise NotImplementedError

    def read_request(self, request: LookupRequest) -> float | int | None:
        """The value of a request-time feature, from the lookup request alone."""
        raise NotImplementedError

    def describe(self) -> str:
        return self.kind


class FeatureKind(ABC):
    """A kind registers under its name and turns validated options into a feature."""

    name: ClassVar[str]
    options_model: ClassVar[type[Options]]
    states: ClassVar[tuple[type[State], ...]] = ()

    @classmethod
    @abstractmethod
    def build(cls, options: Any, context: BuildContext) -> Feature: ...


def check_window(window_s: int, granularity_s: int) -> int:
    """The number of buckets of a window, or a FieldProblem when it does not divide evenly."""
    if window_s % granularity_s:
        raise FieldProblem(
            "window",
            f"{format_duration(window_s)} is not a multiple of granularity "
            f"{format_duration(granularity_s)}",
        )
    return window_s // granularity_s


def check_events(events: tuple[str, ...]) -> frozenset[str]:
    if not events:
        raise FieldProblem("events", f"name at least one event kind of {', '.join(EVENT_KINDS)}")
    return frozenset(events)
