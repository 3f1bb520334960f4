"""Scoring: a snapshot compiled into a function from features to a probability.

Compiled once per snapshot version, then called per candidate on the hot path, so
each term becomes a small closure and nothing is looked up by name twice.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from typing import Any

from windvane.models.snapshot import Clip, Snapshot, Standardize, Term

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
    """Scores one snapshot version; ``per_campaign`` names the features valued per candidate.

    The linear predictor is split in two: the intercept plus the terms that read only
    shared features, summed once per lookup (``shared_part``), and the terms that read a
    candidate's own features, summed per candidate (``campaign_part``). ``score`` adds
    the two the same way whether it is called once or per candidate, so a score never
    depends on how many candidates the request named.
    """

    def __init__(self, snapshot: Snapshot, per_campaign: frozenset[str]) -> None:
        self.snapshot = snapshot
        self.intercept = snapshot.intercept
        plain: dict[str, TermFunction] = {}
        reads_campaign: dict[str, bool] = {}
        for term in snapshot.terms:
            if term.product is None:
                plain[term.name] = _plain_term(term, per_campaign)
                feature = term.feature if term.indicator is None else term.indicator.feature
                reads_campaign[term.name] = feature in per_campaign
        self._shared_terms: list[tuple[float, TermFunction]] = []
        self._campaign_terms: list[tuple[float, TermFunction]] = []
        for term in snapshot.terms:
            function = plain.get(term.name) or _product_term(term, plain)
            if term.product is None:
                per = reads_campaign[term.name]
            else:
                per = any(reads_campaign[name] for name in term.product)
            (self._campaign_terms if per else self._shared_terms).append((term.weight, function))

    def shared_part(self, shared: Features) -> float:
        z = self.intercept
        for weight, function in self._shared_terms:
            z += weight * function(shared, _NONE)[0]
        return z

    def campaign_part(self, shared: Features, campaign: Features) -> float:
        z = 0.0
        for weight, function in self._campaign_terms:
            z += weight * function(shared, campaign)[0]
        return z

    def linear(self, shared: Features, campaign: Features) -> float:
        return self.shared_part(shared) + self.campaign_part(shared, campaign)

    def score(self, shared: Features, campaign: Features | None = None) -> float:
        return logistic(self.linear(shared, campaign or _NONE))

    def scores(self, shared: Features, campaigns: Mapping[str, Features]) -> dict[str, float]:
        """``score`` for every candidate, with the shared part summed once."""
        z = self.shared_part(shared)
        return {name: logistic(z + self.campaign_part(shared, c)) for name, c in campaigns.items()}


_NONE: Features = {}


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
