"""Scoring: a snapshot compiled into a function from features to a probability.

Compiled once per snapshot version, then called per candidate on the hot path, so
each term becomes a small closure and nothing is looked up by name twice.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from typing import Any

from windvane.snapshot import Clip, Snapshot, Standardize, Term

Features = Mapping[str, Any]
# A term's value and whether it fell back to its default.
Valued = tuple[float, bool]
TermFunction = Callable[[Features, Features], Valued]


def logistic(z: float) -> float:
    """1 / (1 + e^-z), without overflow for large |z|."""
    if z >= 0:
        return 1.0 / (1.0 + math.exp(-z))
    e = math.exp(z)
    return e / (1.0 + e)


class Scorer:
    """Scores one snapshot version; ``per_campaign`` names the features valued per candidate."""

    def __init__(self, snapshot: Snapshot, per_campaign: frozenset[str]) -> None:
        self.snapshot = snapshot
        self.intercept = snapshot.intercept
        plain: dict[str, TermFunction] = {}
        for term in snapshot.terms:
            if term.product is None:
                plain[term.name] = _plain_term(term, per_campaign)
        self._terms: list[tuple[float, TermFunction]] = []
        for term in snapshot.terms:
            function = plain.get(term.name) or _product_term(term, plain)
            self._terms.append((term.weight, function))

    def linear(self, shared: Features, campaign: Features) -> float:
        z = self.intercept
        for weight, function in self._terms:
            z += weight * function(shared, campaign)[0]
        return z

    def score(self, shared: Features, campaign: Features | None = None) -> float:
        return logistic(self.linear(shared, campaign or {}))


def _plain_term(term: Term, per_campaign: frozenset[str]) -> TermFunction:
    default = term.default
    if term.indicator is not None:
        name, target = term.indicator.feature, term.indicator.value
        from_campaign = name in per_campaign

        def indicator(shared: Features, campaign: Features) -> Valued:
            value = (campaign if from_campaign else shared).get(name)
            if value is None:
                return default, True
            return (1.0 if value == target else 0.0), False

        return indicator

    name = term.feature or ""
    from_campaign = name in per_campaign
    steps = [_transform(t) for t in term.transforms]

    def numeric(shared: Features, campaign: Features) -> Valued:
        value = (campaign if from_campaign else shared).get(name)
        if value is None or isinstance(value, str):
            return default, True
        x = float(value)
        for step in steps:
            x = step(x)
        if not math.isfinite(x):
            return default, True
        return x, False

    return numeric


def _product_term(term: Term, plain: dict[str, TermFunction]) -> TermFunction:
    if term.product is None:
        raise ValueError(f"term {term.name!r} is neither plain nor a product")
    left, right = plain[term.product[0]], plain[term.product[1]]
    default = term.default

    def product(shared: Features, campaign: Features) -> Valued:
        a, a_missing = left(shared, campaign)
        b, b_missing = right(shared, campaign)
        if a_missing or b_missing:
            return default, True
        return a * b, False

    return product


def _transform(transform: object) -> Callable[[float], float]:
    if transform == "log1p":
        return lambda x: math.log1p(x) if x > -1 else math.nan
    if isinstance(transform, Clip):
        low = -math.inf if transform.clip[0] is None else transform.clip[0]
        high = math.inf if transform.clip[1] is None else transform.clip[1]
        return lambda x: min(max(x, low), high)
    if isinstance(transform, Standardize):
        mean, scale = transform.standardize.mean, transform.standardize.scale
        return lambda x: (x - mean) / scale
    raise ValueError(f"unknown transform {transform!r}")
