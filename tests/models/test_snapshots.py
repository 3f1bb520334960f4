"""Snapshot validation and the registry: a refused snapshot names its term and changes nothing."""

from __future__ import annotations

import copy
import math

import orjson
import pytest

from tests.conftest import FEATUREDEFS
from tests.support import GOOD_SNAPSHOT
from windvane.definitions.plan import load_plan
from windvane.errors import BadSnapshot, UnknownModel
from windvane.models.registry import Arm, ModelRegistry
from windvane.models.scoring import Scorer, logistic
from windvane.models.snapshot import parse_snapshot
from windvane.serving.state import feature_shapes
from windvane.store import open_store

SHAPES = feature_shapes(load_plan(FEATUREDEFS))


def registry(store_url: str) -> ModelRegistry:
    store = open_store(store_url)
    return ModelRegistry(store, SHAPES)


def variant(path: str, value: object) -> dict:
    """GOOD_SNAPSHOT with one value replaced: path like 'terms.1.weight'."""
    doc = copy.deepcopy(GOOD_SNAPSHOT)
    *parents, last = path.split(".")
    target: object = doc
    for part in parents:
        target = target[int(part)] if part.isdigit() else target[part]  # type: ignore[index]
    if value is KeyError:
        del target[int(last) if last.isdigit() else last]  # type: ignore[arg-type]
    else:
        target[int(last) if last.isdigit() else last] = value  # type: ignore[index]
    return doc


BAD = [
    (variant("terms.0.feature", "app_ctrr"), "terms[0] 'ctr'", "not produced by the definitions"),
    (variant("terms.1.weight", math.nan), "terms[1] 'frac': weight", "finite"),
    (variant("intercept", math.inf), "intercept", "finite"),
    (variant("terms.3.indicator.feature", "hour"), "terms[3] 'evening'", "'hour' is not produced"),
    (
        variant("terms.4.product", ["ctr", "nope"]),
        "terms[4] 'ctr_x_frac'",
        "'nope', which is not a term",
    ),
    (variant("terms.2.name", "ctr"), "terms[2] 'ctr'", "already has this name"),
    (variant("terms.1.transforms.0.clip", [1, 0]), "terms[1] 'frac'", "exceeds upper bound"),
    (
        variant("terms.1.transforms.1.standardize.scale", 0),
        "terms[1] 'frac': transforms.1.standardize.scale",
        "greater than 0",
    ),
    (variant("terms.3.transforms", ["log1p"]), "terms[3] 'evening'", "feature term only"),
    (variant("terms.2.colour", "blue"), "terms[2] 'freq': colour", "unknown field"),
    (variant("terms.2.weight", KeyError), "terms[2] 'freq': weight", "missing"),
    (variant("link", "probit"), "link", "'logistic'"),
    (variant("model", "other-model"), "model", "not 'ctr'"),
]


@pytest.mark.parametrize(("document", "field", "words"), BAD)
def test_bad_snapshots_are_refused_naming_the_term(
    store_url: str, document: dict, field: str, words: str
) -> None:
    models = registry(store_url)
    models.publish("ctr", dict(GOOD_SNAPSHOT), "test", activate=True)
    before = (models.history("ctr"), models.active("ctr"), models.audit("ctr"))
    with pytest.raises(BadSnapshot) as err:
        models.publish(
            "ctr",
            {**document, "version": "v2"} if "version" in document else document,
            "test",
            activate=True,
        )
    assert err.value.field == field, err.value
    assert words in err.value.reason
    assert (models.history("ctr"), models.active("ctr"), models.audit("ctr")) == before


def test_version_must_be_new_and_json_must_parse(store_url: str) -> None:
    models = registry(store_url)
    models.publish("ctr", GOOD_SNAPSHOT, "test", activate=True)
    with pytest.raises(BadSnapshot) as err:
        models.publish("ctr", GOOD_SNAPSHOT, "test")
    assert (err.value.field, err.value.reason) == (
        "version",
        "version 'v1' of model 'ctr' already exists",
    )
    with pytest.raises(BadSnapshot) as err:
        models.publish("ctr", b'{"version": "v3", "intercept": ', "test")
    assert "not valid JSON" in err.value.reason
    # NaN written in the file is reported against its term, not as unreadable JSON.
    text = (
        b'{"version": "v3", "intercept": 0,'
        b' "terms": [{"name": "a", "feature": "app_ctr", "weight": NaN}]}'
    )
    with pytest.raises(BadSnapshot) as err:
        models.publish("ctr", text, "test")
    assert err.value.field == "terms[0] 'a': weight"
    assert [m["version"] for m in models.history("ctr")] == ["v1"]


def test_activate_split_and_rollback(store_url: str) -> None:
    models = registry(store_url)
    models.publish("ctr", GOOD_SNAPSHOT, "ana", activate=True)
    models.publish("ctr", {**GOOD_SNAPSHOT, "version": "v2", "intercept": -2.5}, "ben")
    split = models.activate("ctr", [Arm("v1", 90), Arm("v2", 10)], "ana")
    assert [(a.version, a.weight) for a in models.active("ctr").arms] == [("v1", 90), ("v2", 10)]
    assert split.by == "ana"
    with pytest.raises(UnknownModel):
        models.activate("ctr", [Arm("v9", 100)], "ana")
    with pytest.raises(BadSnapshot):
        models.activate("ctr", [Arm("v1", 0)], "ana")
    assert [a.version for a in models.active("ctr").arms] == ["v1", "v2"]
    restored = models.rollback("ctr", "ana")
    assert [(a.version, a.weight) for a in restored.arms] == [("v1", 100)]
    assert models.active("ctr") == restored
    with pytest.raises(BadSnapshot, match="no earlier activation"):
        models.rollback("ctr", "ana")
    history = models.history("ctr")
    assert [(m["version"], m["by"]) for m in history] == [("v1", "ana"), ("v2", "ben")]
    assert all(len(m["checksum"]) == 64 for m in history)
    assert [e["action"] for e in models.audit("ctr")] == [
        "publish",
        "activate",
        "publish",
        "activate",
        "rollback",
    ]
    with pytest.raises(UnknownModel):
        models.rollback("no-such-model", "ana")


def test_scoring_follows_the_documented_terms() -> None:
    scorer = Scorer(parse_snapshot(GOOD_SNAPSHOT), frozenset({"imps_1h"}))
    shared = {"app_ctr": 0.01, "screen_fraction": 1.4, "local_hour": 21}
    ctr, frac = math.log1p(0.01), (1.0 - 0.1) / 0.2
    # reference: the logistic function of the intercept plus weighted terms, written out
    z = -3.0 + 20 * ctr + 0.5 * frac - 0.2 * 2 + 0.3 * 1 + 1.5 * ctr * frac
    assert scorer.score(shared, {"imps_1h": 2}) == pytest.approx(1 / (1 + math.exp(-z)), abs=1e-15)
    # Missing features take each term's default; a product with a missing factor too.
    z_missing = -3.0 + 20 * ctr + 0.5 * 0.0 - 0.2 * 0.0 + 0.3 * 0 + 1.5 * -0.1
    missing = scorer.score({"app_ctr": 0.01, "screen_fraction": None, "local_hour": None}, {})
    assert missing == pytest.approx(1 / (1 + math.exp(-z_missing)), abs=1e-15)
    assert logistic(800.0) == 1.0
    assert logistic(-800.0) == pytest.approx(0.0, abs=1e-300)


def test_a_lone_surrogate_or_deep_nesting_is_refused_before_anything_is_stored(
    store_url: str,
) -> None:
    """The standard library reads both; storing either failed with a 500 (issue 10)."""
    models = registry(store_url)
    notes = {**GOOD_SNAPSHOT, "training": {"notes": "NOTES"}}
    cases = [
        (orjson.dumps(notes).replace(b"NOTES", b"\\udfff"), "training.notes", "lone surrogate"),
        (orjson.dumps(notes).replace(b"NOTES", b"a\xed\xa0\x80"), "training.notes", "surrogate"),
        ({**GOOD_SNAPSHOT, "training": {"\udfff": 1}}, "training.\\udfff", "surrogate"),
        (orjson.dumps(notes).replace(b'"NOTES"', b"[" * 64 + b"]" * 64), "training", "nested"),
        (b"[" * 100_000 + b"]" * 100_000, "", "nested deeper than 64 levels"),
    ]
    for document, field, reason in cases:
        with pytest.raises(BadSnapshot) as refused:
            models.publish("ctr", document, "test")
        assert refused.value.field == field
        assert reason in refused.value.reason
    assert models.models() == []
    # The document and training are two of the 64 levels: the notes may nest 62 more.
    expected: list = []
    for _ in range(61):
        expected = [expected]
    fits = orjson.dumps(notes).replace(b'"NOTES"', b"[" * 62 + b"]" * 62)
    assert parse_snapshot(fits).training == {"notes": expected}
