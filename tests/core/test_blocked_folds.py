"""validation.scheme 'blocked': contiguous folds in the order column's order."""

from __future__ import annotations

import numpy as np
import pytest
from fastapi.testclient import TestClient
from service.app import app
from service.core import transforms as tr
from service.core.crossval import cross_validate
from service.core.data import prepare
from service.core.folds import make_plan
from service.core.spec import build_design
from service.selection.search import run_selection, select
from service.selection.search_setup import SearchOptions

from tests.typed import predictors, responses


def _ordered(n=41, seed=21):
    rng = np.random.default_rng(seed)
    t = rng.permutation(n).astype(float)
    x = rng.uniform(1, 6, n)
    e = np.cumsum(rng.normal(0, 0.1, n))[np.argsort(np.argsort(t))]  # serially correlated
    y = np.exp(0.4 + 0.3 * x + e)
    return {"y": y.tolist(), "x": x.tolist(), "t": t.tolist()}


def test_every_candidate_is_scored_on_the_blocked_folds():
    cols = _ordered()
    prep = prepare({"columns": cols}, "y", ["x"], order="t")
    opts = SearchOptions(
        response_transforms=responses(["identity", "log", "sqrt", "box_cox"]),
        predictor_transforms=predictors(["identity", "log"]),
        folds=4,
        scheme="blocked",
    )
    result = select(prep, opts, "test")
    out = result.body
    plan = make_plan(prep.n, 4, 1, 0, scheme="blocked", order=prep.order)
    assert len(result.scored) >= 6
    for s in result.scored:
        d = build_design(s.spec, prep)
        fresh = cross_validate(
            d.X, prep.y, s.spec.response_transform, plan, tr.needs_shift(prep.y), d.names
        )
        # re-scoring on an independently built blocked plan reproduces every candidate's CV
        np.testing.assert_allclose(s.cv.fold_values, fresh.fold_values, rtol=1e-12)
    assert all(e.cv.scheme == "blocked" for e in out.ranking)
    random = run_selection(
        prep,
        SearchOptions(
            folds=4,
            response_transforms=responses(["identity"]),
            predictor_transforms=predictors(["identity"]),
        ),
        "test",
    )
    assert random.ranking[0].cv.scheme == "random"


@pytest.fixture(scope="module")
def client():
    return TestClient(app)


def _request(**validation):
    return {
        "data": {"columns": _ordered()},
        "response": "y",
        "predictors": ["x"],
        "order": "t",
        "validation": validation,
    }


def test_blocked_over_http(client):
    r = client.post("/v1/selections", json=_request(scheme="blocked", folds=4))
    assert r.status_code == 200, r.text
    assert {e["cv"]["scheme"] for e in r.json()["ranking"]} == {"blocked"}
    assert not any("random, not blocked" in w for e in r.json()["ranking"] for w in e["warnings"])


def test_blocked_with_repeats_is_a_clear_422(client):
    r = client.post("/v1/selections", json=_request(scheme="blocked", repeats=3))
    assert r.status_code == 422, r.text
    p = r.json()
    assert p["errors"][0]["pointer"] == "/validation/repeats"
    assert "repeats 1" in p["errors"][0]["detail"] and "blocked" in p["errors"][0]["detail"]


def test_unknown_scheme_is_rejected(client):
    r = client.post("/v1/selections", json=_request(scheme="shuffled"))
    assert r.status_code == 422, r.text
    assert r.json()["errors"][0]["pointer"] == "/validation/scheme"
