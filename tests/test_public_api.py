"""The library's public names, locked: adding or removing one is a decision, not an accident."""

from __future__ import annotations

import windvane

PUBLIC = [
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


def test_all_is_sorted_and_locked() -> None:
    assert windvane.__all__ == sorted(windvane.__all__)
    assert windvane.__all__ == PUBLIC


def test_every_public_name_is_there() -> None:
    for name in windvane.__all__:
        assert getattr(windvane, name) is not None, name


def test_every_public_error_descends_from_the_one_root() -> None:
    errors = [getattr(windvane, n) for n in PUBLIC]
    errors = [e for e in errors if isinstance(e, type) and issubclass(e, Exception)]
    assert len(errors) == 11
    for error in errors:
        assert issubclass(error, windvane.WindvaneError), error


def test_the_version_is_the_installed_one() -> None:
    from importlib import metadata

    assert windvane.__version__ == metadata.version("windvane")
