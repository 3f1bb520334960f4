"""Reading feature definition files: TOML, one ``[[feature]]`` table per feature.

    [[feature]]
    name = "imps_1h"
    kind = "window_count"
    key = "user+campaign"
    events = ["impression"]
    window = "1h"
    granularity = "1m"

A directory holds any number of ``*.toml`` files, read in name order; an optional
``[settings]`` table (in at most one file) sets ``expire_margin``, the time every key is
kept beyond its longest window. Mistakes are collected, not raised one at a time, so
``windvane check`` can list them all, one line each, naming file, feature and field.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from pydantic import BaseModel, ConfigDict, ValidationError

from windvane.errors import DefinitionError
from windvane.kinds import KINDS
from windvane.kinds.base import DurationS, Options

DEFAULT_EXPIRE_MARGIN_S = 3600


class Settings(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    expire_margin: DurationS = DEFAULT_EXPIRE_MARGIN_S


@dataclass(frozen=True)
class Definition:
    """One feature's validated options and the file it came from."""

    path: Path
    options: Options


@dataclass(frozen=True)
class DefinitionSet:
    directory: Path
    definitions: tuple[Definition, ...]
    settings: Settings
    settings_path: Path | None


def load_definitions(directory: str | Path) -> DefinitionSet:
    """Read and validate every definition file under ``directory``, or raise DefinitionError."""
    root = Path(directory)
    if not root.is_dir():
        raise DefinitionError([f"{root}: not a directory of feature definitions"])
    files = sorted(root.glob("*.toml"))
    if not files:
        raise DefinitionError([f"{root}: no *.toml feature definition files"])
    problems: list[str] = []
    definitions: list[Definition] = []
    settings, settings_path = Settings(), None
    seen: dict[str, Path] = {}
    for path in files:
        try:
            document = tomllib.loads(path.read_text(encoding="utf-8"))
        except (OSError, UnicodeDecodeError) as exc:
            problems.append(f"{path}: cannot read: {exc}")
            continue
        except tomllib.TOMLDecodeError as exc:
            problems.append(f"{path}: not valid TOML: {exc}")
            continue
        for section in document:
            if section not in ("feature", "settings"):
                problems.append(
                    f"{path}: unknown section [{section}] (expected [[feature]] or [settings])"
                )
        if "settings" in document:
            if settings_path is not None:
                problems.append(f"{path}: [settings] is already given in {settings_path}")
            else:
                try:
                    settings = Settings.model_validate(document["settings"])
                    settings_path = path
                except ValidationError as exc:
                    problems.extend(_pydantic_lines(path, "[settings]", exc))
        tables = document.get("feature", [])
        if not isinstance(tables, list):
            problems.append(f"{path}: write each feature as a [[feature]] table")
            continue
        for number, table in enumerate(tables, start=1):
            options = _validate_table(path, number, table, problems)
            if options is None:
                continue
            if options.name in seen:
                problems.append(
                    f"{path}: feature {options.name!r}: field 'name': duplicate feature name "
                    f"(also defined in {seen[options.name]})"
                )
                continue
            seen[options.name] = path
            definitions.append(Definition(path, options))
    if problems:
        raise DefinitionError(problems)
    return DefinitionSet(root, tuple(definitions), settings, settings_path)


def _validate_table(path: Path, number: int, table: Any, problems: list[str]) -> Options | None:
    label = f"feature #{number}"
    if not isinstance(table, dict):
        problems.append(f"{path}: {label}: write it as a [[feature]] table")
        return None
    name = table.get("name")
    if isinstance(name, str) and name:
        label = f"feature {name!r}"
    else:
        problems.append(f"{path}: {label}: field 'name': is missing")
        return None
    kind = table.get("kind")
    if kind not in KINDS:
        shown = "is missing" if kind is None else f"unknown kind {kind!r}"
        problems.append(f"{path}: {label}: field 'kind': {shown} (known: {', '.join(KINDS)})")
        return None
    try:
        return KINDS[kind].options_model.model_validate(table)
    except ValidationError as exc:
        problems.extend(_pydantic_lines(path, label, exc))
        return None


def _pydantic_lines(path: Path, label: str, exc: ValidationError) -> list[str]:
    lines = []
    for error in exc.errors(include_url=False):
        field = ".".join(str(part) for part in error["loc"]) or "?"
        message = error["msg"].removeprefix("Value error, ")
        if error["type"] == "extra_forbidden":
            message = "unknown field (check the spelling against the kind's fields)"
        elif error["type"] == "missing":
            message = "is missing"
        elif error["type"] == "literal_error":
            message = f"{error['input']!r} is not allowed: {message}"
        lines.append(f"{path}: {label}: field {field!r}: {message}")
    return lines
