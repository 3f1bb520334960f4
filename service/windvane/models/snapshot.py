"""Coefficient snapshots: one model version's logistic regression, as data scientists publish it.

A snapshot is a JSON document of our own design:

    {
      "version": "2026-12-01.1",
      "link": "logistic",
      "intercept": -4.1,
      "terms": [
        {"name": "ctr", "feature": "app_ctr", "transforms": ["log1p"],
         "weight": 9.5, "default": 0.0},
        {"name": "frac", "feature": "screen_fraction",
         "transforms": [{"clip": [0, 1]}, {"standardize": {"mean": 0.08, "scale": 0.1}}],
         "weight": 0.4, "default": 0.0},
        {"name": "late_evening", "indicator": {"feature": "local_hour", "value": 21},
         "weight": 0.3, "default": 0.0},
        {"name": "ctr_x_frac", "product": ["ctr", "frac"], "weight": 1.2, "default": 0.0}
      ],
      "training": {"rows": 120000, "period": "2026-11-24/2026-11-30", "metrics": {"auc": 0.71}},
      "baseline": {"app_ctr": {"edges": [0, 0.005, 0.01, 1], "counts": [400, 350, 250]}}
    }

A term's value is its feature after the listed transforms (applied in order), 1 or 0
for an indicator, or the product of two other terms' values. ``default`` is the term's
value when its feature (either factor's, for a product) is missing, so a store outage
scores with the defaults instead of failing. The score is the logistic function of the
intercept plus the weighted term values.

Validation is complete before anything is stored: every term must name a feature the
definitions produce, every number must be finite, names must be unique, products must
name two plain terms. Errors name the term.
"""

from __future__ import annotations

import hashlib
import json
import re
from typing import Annotated, Any, Literal

from pydantic import (
    BaseModel,
    ConfigDict,
    Discriminator,
    Field,
    Tag,
    ValidationError,
    model_validator,
)

from windvane.errors import BadSnapshot
from windvane.inputs.json_body import DEPTH_REASON, SURROGATE_REASON, depth_problem, text_problem

Name = Annotated[str, Field(pattern=r"^[A-Za-z_][A-Za-z0-9_]{0,63}$")]
Version = Annotated[str, Field(pattern=r"^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$")]
MODEL_NAME = re.compile(r"^[a-z0-9][a-z0-9_-]{0,63}$")
ModelName = Annotated[str, Field(pattern=MODEL_NAME.pattern)]
Finite = Annotated[float, Field(allow_inf_nan=False)]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class Clip(_Strict):
    clip: tuple[Finite | None, Finite | None]


class StandardizeParams(_Strict):
    mean: Finite
    scale: Annotated[float, Field(gt=0, allow_inf_nan=False)]


class Standardize(_Strict):
    standardize: StandardizeParams


def _transform_kind(value: Any) -> str | None:
    if value == "log1p" or isinstance(value, str):
        return "Log1p"
    if isinstance(value, dict) and len(value) == 1:
        return {"clip": "Clip", "standardize": "Standardize"}.get(next(iter(value)))
    if isinstance(value, Clip | Standardize):
        return type(value).__name__
    return None


# Tagged by shape, so that an error inside {"standardize": ...} is reported there.
Transform = Annotated[
    Annotated[Literal["log1p"], Tag("Log1p")]
    | Annotated[Clip, Tag("Clip")]
    | Annotated[Standardize, Tag("Standardize")],
    Discriminator(
        _transform_kind,
        custom_error_type="transform",
        custom_error_message='a transform is "log1p", {"clip": [low, high]} or '
        '{"standardize": {"mean": m, "scale": s}}',
    ),
]


class Indicator(_Strict):
    feature: str
    value: float | int | str | bool


class Term(_Strict):
    name: Name
    feature: str | None = None
    transforms: tuple[Transform, ...] = ()
    indicator: Indicator | None = None
    product: tuple[Name, Name] | None = None
    weight: Finite
    default: Finite = 0.0

    @model_validator(mode="after")
    def _one_shape(self) -> Term:
        shapes = [x is not None for x in (self.feature, self.indicator, self.product)]
        if sum(shapes) != 1:
            raise ValueError("give exactly one of feature, indicator or product")
        if self.transforms and self.feature is None:
            raise ValueError("transforms apply to a feature term only")
        for transform in self.transforms:
            if isinstance(transform, Clip):
                low, high = transform.clip
                if low is not None and high is not None and low > high:
                    raise ValueError(f"clip lower bound {low:g} exceeds upper bound {high:g}")
        return self


class Snapshot(_Strict):
    model: ModelName | None = None
    version: Version
    link: Literal["logistic"] = "logistic"
    intercept: Finite
    terms: tuple[Term, ...]
    training: dict[str, Any] | None = None
    baseline: dict[str, Any] | None = None


def parse_snapshot(data: bytes | str | dict[str, Any]) -> Snapshot:
    """Validate a snapshot document's shape; BadSnapshot names the first bad term or field.

    Read with the standard library rather than orjson so that a NaN or Infinity in the
    file is reported against its term instead of as unreadable JSON. The standard
    library also reads a lone surrogate (``"\\udfff"``) into a string that cannot be
    stored, and recurses once per level: such documents are refused here, naming the
    field, before anything is stored.
    """
    if isinstance(data, bytes | str):
        try:
            data = json.loads(data)
        except (ValueError, UnicodeDecodeError) as exc:
            raise BadSnapshot("", f"not valid JSON ({exc})") from None
        except RecursionError:
            raise BadSnapshot("", f"the JSON {DEPTH_REASON}") from None
    if not isinstance(data, dict):
        raise BadSnapshot("", "a snapshot must be a JSON object")
    too_deep = depth_problem(data)
    if too_deep is not None:
        raise BadSnapshot(too_deep, DEPTH_REASON)
    not_unicode = text_problem(data)
    if not_unicode is not None:
        raise BadSnapshot(not_unicode, SURROGATE_REASON)
    try:
        return Snapshot.model_validate(data)
    except ValidationError as exc:
        error = exc.errors(include_url=False)[0]
        raise BadSnapshot(_location(error["loc"], data), _message(error)) from None


def check_against_features(snapshot: Snapshot, features: dict[str, str]) -> None:
    """Refuse a snapshot whose terms name features the definitions do not produce.

    ``features`` maps each feature the definitions produce to its kind of value
    (``shared`` or ``per_campaign``).
    """
    names: dict[str, Term] = {}
    for index, term in enumerate(snapshot.terms):
        where = f"terms[{index}] {term.name!r}"
        if term.name in names:
            raise BadSnapshot(where, "another term already has this name")
        names[term.name] = term
        feature = term.feature or (term.indicator.feature if term.indicator else None)
        if feature is not None and feature not in features:
            known = ", ".join(sorted(features))
            raise BadSnapshot(
                where, f"feature {feature!r} is not produced by the definitions (known: {known})"
            )
    for index, term in enumerate(snapshot.terms):
        if term.product is None:
            continue
        where = f"terms[{index}] {term.name!r}"
        for factor in term.product:
            if factor not in names:
                raise BadSnapshot(where, f"product names {factor!r}, which is not a term")
            if names[factor].product is not None:
                raise BadSnapshot(where, f"product factor {factor!r} is itself a product")


def checksum(snapshot: Snapshot) -> str:
    """SHA-256 of the snapshot's canonical JSON: the same coefficients, the same checksum."""
    canonical = json.dumps(
        snapshot.model_dump(mode="json", exclude={"model"}), sort_keys=True, separators=(",", ":")
    )
    return hashlib.sha256(canonical.encode()).hexdigest()


def _location(loc: tuple[Any, ...], data: dict[str, Any]) -> str:
    if len(loc) >= 2 and loc[0] == "terms" and isinstance(loc[1], int):
        terms = data.get("terms")
        name = None
        if isinstance(terms, list) and loc[1] < len(terms) and isinstance(terms[loc[1]], dict):
            name = terms[loc[1]].get("name")
        head = f"terms[{loc[1]}]" + (f" {name!r}" if isinstance(name, str) else "")
        rest = ".".join(str(part) for part in loc[2:] if not _is_union_tag(part))
        return f"{head}: {rest}" if rest else head
    return ".".join(str(part) for part in loc if not _is_union_tag(part))


def _is_union_tag(part: object) -> bool:
    # pydantic names the union member it tried (for example "Clip" or "literal['log1p']").
    return isinstance(part, str) and (part[:1].isupper() or part.startswith("literal["))


def _message(error: dict[str, Any]) -> str:
    message = str(error["msg"]).removeprefix("Value error, ")
    if error["type"] == "finite_number":
        return "must be a finite number (no NaN or Infinity)"
    if error["type"] == "extra_forbidden":
        return "unknown field"
    if error["type"] == "missing":
        return "is missing"
    return message
