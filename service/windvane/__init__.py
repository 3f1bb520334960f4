"""windvane: behavioural features and model coefficients for real-time bidders, kept in Redis.

The names below are the library's public face, what a program that embeds windvane
needs: open an engine on a definitions directory and a store, apply events, answer
lookups, replay logs, and catch windvane's errors. Everything else may move between
releases. ``tests/test_public_api.py`` locks this list.
"""

from __future__ import annotations

from importlib import metadata

from windvane.definitions.plan import Plan, load_plan
from windvane.engine import Engine
from windvane.errors import (
    BadEvent,
    BadRequest,
    BadSnapshot,
    DefinitionError,
    InputError,
    NotAuthorized,
    StoreError,
    StoreUnavailable,
    UnknownModel,
    UsageError,
    WindvaneError,
)
from windvane.ingest.rejects import RejectsFile
from windvane.ingest.replay import ReplayStats, replay
from windvane.inputs.events import Event, parse_event
from windvane.inputs.lookup_request import LookupRequest, parse_lookup_request
from windvane.store import StateStore, open_store

__version__ = metadata.version("windvane")  # written once, in pyproject.toml

__all__ = [
    "BadEvent",
    "BadRequest",
    "BadSnapshot",
    "DefinitionError",
    "Engine",
    "Event",
    "InputError",
    "LookupRequest",
    "NotAuthorized",
    "Plan",
    "RejectsFile",
    "ReplayStats",
    "StateStore",
    "StoreError",
    "StoreUnavailable",
    "UnknownModel",
    "UsageError",
    "WindvaneError",
    "__version__",
    "load_plan",
    "open_store",
    "parse_event",
    "parse_lookup_request",
    "replay",
]
