"""Scores against scikit-learn: a LogisticRegression fitted on a demo export, as a snapshot.

The export is what a data scientist would pull: for each impression of a demo log,
the features windvane answers for that user, app, campaign and time, and whether it
was clicked. The design matrix is built here with numpy from the raw features, the
model is fitted with scikit-learn, its coefficients become a snapshot, and windvane's
scores must equal ``predict_proba`` to 1e-9.
"""

from __future__ import annotations

import math
import time
from pathlib import Path

import numpy as np
import orjson
from sklearn.linear_model import LogisticRegression

from tests.conftest import FEATUREDEFS
from tests.support import engine_for
from windvane.errors import BadEvent
from windvane.ingest.rejects import RejectsFile
from windvane.ingest.replay import replay
from windvane.inputs.events import parse_event_line
from windvane.models.scoring import Scorer
from windvane.models.snapshot import parse_snapshot
from windvane_demo.generate import build_log, write_lines

CTR_MEAN, CTR_SCALE = 0.006, 0.003


def export(tmp_path: Path, store_url: str) -> tuple[list[dict], list[dict], np.ndarray]:
    end = time.time() // 3600 * 3600
    demo = build_log(seed=11, events=60_000, end_ts=end, hours=8)
    log = tmp_path / "demo.jsonl"
    write_lines(demo.lines, str(log))
    engine = engine_for(FEATUREDEFS, store_url)
    engine.store.flush()
    with RejectsFile(tmp_path / "rejects.jsonl") as rejects:
        replay(engine, [str(log)], rejects)
    # Only the events the replay accepted: the demo log holds malformed lines on purpose,
    # and which ones fall among the first 3,000 impressions depends on the hour it ends.
    events = []
    for line in demo.lines:
        try:
            parse_event_line(line)
        except BadEvent:
            continue
        events.append(orjson.loads(line))
    requests = {e["id"]: e for e in events if e.get("kind") == "request"}
    clicked = {e["id"] for e in events if e.get("kind") == "click"}
    shared, per_campaign, labels = [], [], []
    for e in events:
        if e.get("kind") != "impression" or e["id"] not in requests or "ts" not in e:
            continue
        request = requests[e["id"]]
        answer = engine.lookup(
            {
                key: request[key]
                for key in ("user", "app", "device", "geo", "slot", "coppa")
                if key in request
            }
            | {"ts": e["ts"], "campaigns": [e["campaign"]]}
        )
        shared.append(answer["features"])
        per_campaign.append(answer["campaigns"][e["campaign"]])
        labels.append(int(e["id"] in clicked))
        if len(labels) == 3000:
            break
    return shared, per_campaign, np.array(labels)


def design(shared: list[dict], per_campaign: list[dict]) -> np.ndarray:
    """The terms of the snapshot below, computed with numpy; missing values take defaults."""

    def column(rows: list[dict], name: str, default: float) -> np.ndarray:
        return np.array([default if r[name] is None else float(r[name]) for r in rows])

    ctr = (column(shared, "app_ctr", CTR_MEAN) - CTR_MEAN) / CTR_SCALE
    frac = np.clip(column(shared, "screen_fraction", 0.0), 0.0, 1.0)
    freq = np.log1p(column(per_campaign, "imps_1h", 0.0))
    evening = (column(shared, "local_hour", -1.0) == 21).astype(float)
    depth = np.clip(column(shared, "session_depth", 1.0), 0, 20)
    return np.column_stack([ctr, frac, freq, evening, depth, ctr * frac])


def snapshot_from(model: LogisticRegression) -> dict:
    weights = [float(w) for w in model.coef_[0]]
    return {
        "version": "fitted-1",
        "intercept": float(model.intercept_[0]),
        "terms": [
            {
                "name": "ctr",
                "feature": "app_ctr",
                "transforms": [{"standardize": {"mean": CTR_MEAN, "scale": CTR_SCALE}}],
                "weight": weights[0],
                "default": 0.0,
            },
            {
                "name": "frac",
                "feature": "screen_fraction",
                "transforms": [{"clip": [0, 1]}],
                "weight": weights[1],
                "default": 0.0,
            },
            {
                "name": "freq",
                "feature": "imps_1h",
                "transforms": ["log1p"],
                "weight": weights[2],
                "default": 0.0,
            },
            {
                "name": "evening",
                "indicator": {"feature": "local_hour", "value": 21},
                "weight": weights[3],
                "default": 0.0,
            },
            {
                "name": "depth",
                "feature": "session_depth",
                "transforms": [{"clip": [0, 20]}],
                "weight": weights[4],
                "default": 1.0,
            },
            {
                "name": "ctr_x_frac",
                "product": ["ctr", "frac"],
                "weight": weights[5],
                "default": 0.0,
            },
        ],
    }


def test_scores_equal_scikit_learn_predict_proba(tmp_path: Path, redis_server) -> None:
    shared, per_campaign, labels = export(tmp_path, redis_server.url)
    assert len(labels) >= 2000
    assert 0 < labels.sum() < len(labels)
    x = design(shared, per_campaign)
    model = LogisticRegression(C=10.0, max_iter=5000).fit(x, labels)
    expected = model.predict_proba(x)[:, 1]
    scorer = Scorer(parse_snapshot(snapshot_from(model)), frozenset({"imps_1h"}))
    got = np.array([scorer.score(s, c) for s, c in zip(shared, per_campaign, strict=True)])
    # reference: scikit-learn LogisticRegression.predict_proba, absolute tolerance 1e-9
    assert np.max(np.abs(got - expected)) < 1e-9
    # The comparison is not vacuous: the scores spread and the fit learnt something.
    assert expected.std() > 1e-3
    assert not math.isclose(float(model.coef_[0][0]), 0.0, abs_tol=1e-6)
