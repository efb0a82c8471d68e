"""Keep or switch the specification in use, over HTTP, on simulated data with a known answer.

The invented data are repair costs of water mains generated on the log scale:
log(cost) = 4 + 0.7 log(length) + 0.01 age + N(0, 0.2^2), so the right incumbent is
log(cost) on log(length) and age, and one on the raw scale is clearly wrong.
"""

from __future__ import annotations

import math
from types import SimpleNamespace

import numpy as np
import pytest
from fastapi.testclient import TestClient
from service.app import app
from sklearn.linear_model import LinearRegression
from sklearn.model_selection import KFold

from tests.typed import spec_of

URL = "/v1/selections"
N = 200
SEED = 7


@pytest.fixture(scope="module")
def client():
    with TestClient(app, raise_server_exceptions=False) as c:
        yield c


def _columns() -> dict:
    rng = np.random.default_rng(SEED)
    length = np.round(np.exp(rng.uniform(math.log(5.0), math.log(500.0), N)), 1)
    age = rng.integers(1, 81, N)
    age[:4] = 0  # four new mains
    cost = np.round(np.exp(4.0 + 0.7 * np.log(length) + 0.01 * age + rng.normal(0, 0.2, N)), 2)
    return {
        "repair_cost": cost.tolist(),
        "pipe_length_m": length.tolist(),
        "pipe_age_years": [int(a) for a in age],
    }


COLUMNS = _columns()


def _spec(resp="identity", length="identity", age="identity", extra=None) -> dict:
    preds = [
        {"column": "pipe_length_m", "transform": {"name": length}},
        {"column": "pipe_age_years", "transform": {"name": age}},
    ]
    if extra:
        preds.append({"column": extra, "transform": {"name": "identity"}})
    return {
        "response": {"column": "repair_cost", "transform": {"name": resp}},
        "predictors": preds,
        "intercept": True,
    }


def _request(incumbent: dict, **over) -> dict:
    body = {
        "data": {"columns": COLUMNS},
        "response": "repair_cost",
        "predictors": ["pipe_length_m", "pipe_age_years"],
        "transforms": {"response": ["identity", "log"], "predictors": ["identity", "log"]},
        "validation": {"folds": 5, "seed": 3},
        "top": 2,
        "incumbent": incumbent,
    }
    body.update(over)
    return body


def _fold_rmse(log_scale: bool) -> np.ndarray:
    """Per-fold RMSE on the original scale, recomputed with scikit-learn.

    source: scikit-learn KFold(5, shuffle=True, random_state=seed) is the service's
    partition (DEVELOPERS.md); a log model's mean is Duan's (1983) smearing estimate
    exp(x'b) * mean(exp(e_train)); an identity model's mean is x'b.
    """
    y = np.array(COLUMNS["repair_cost"])
    length = np.array(COLUMNS["pipe_length_m"])
    age = np.array(COLUMNS["pipe_age_years"], float)
    X = np.column_stack([np.log(length) if log_scale else length, age])
    z = np.log(y) if log_scale else y
    out = []
    for train, test in KFold(5, shuffle=True, random_state=3).split(X):
        m = LinearRegression().fit(X[train], z[train])
        eta = m.predict(X[test])
        mean = np.exp(eta) * np.mean(np.exp(z[train] - m.predict(X[train]))) if log_scale else eta
        out.append(math.sqrt(np.mean((y[test] - mean) ** 2)))
    return np.array(out)


def test_incumbent_on_the_true_scale_is_kept(client):
    r = client.post(URL, json=_request(_spec("log", "log", "identity")))
    assert r.status_code == 200, r.text
    inc = r.json()["incumbent"]
    # source: the simulation's construction (the incumbent is the generating scale)
    assert inc["decision"] == "keep"
    assert inc["rank"] == 1
    assert inc["difference"]["value"] == pytest.approx(0.0, abs=1e-9)
    assert "rank-1" in inc["reason"]


def test_incumbent_on_a_clearly_wrong_scale_is_switched(client):
    r = client.post(URL, json=_request(_spec()))
    assert r.status_code == 200, r.text
    body = r.json()
    inc = body["incumbent"]
    assert body["ranking"][0]["specification"]["response"]["transform"]["name"] == "log"
    assert inc["decision"] == "switch"
    assert inc["rank"] > 1
    # paired difference over the same folds, recomputed independently with scikit-learn
    inc_folds = _fold_rmse(log_scale=False)
    win_folds = _fold_rmse(log_scale=True)
    d = win_folds - inc_folds
    y = np.array(COLUMNS["repair_cost"])
    # pooled RMSE over all held-out rows = sqrt(sum n_k rmse_k^2 / n)
    sizes = np.array([len(t) for _, t in KFold(5, shuffle=True, random_state=3).split(y)])
    pooled = math.sqrt(float(np.sum(sizes * inc_folds**2) / sizes.sum()))
    assert inc["cv"]["value"] == pytest.approx(pooled, rel=1e-9)
    assert inc["difference"]["value"] == pytest.approx(d.mean(), rel=1e-9)
    assert inc["difference"]["std_error"] == pytest.approx(
        np.std(d, ddof=1) / math.sqrt(5), rel=1e-9
    )
    assert inc["difference"]["value"] < -inc["difference"]["std_error"]
    assert "lower cross-validated rmse" in inc["reason"]
    assert f"{-d.mean():.4g}" in inc["reason"]


def test_incumbent_with_a_column_missing_from_the_data_is_switched_with_reason(client):
    r = client.post(URL, json=_request(_spec("log", "log", extra="pipe_diameter_mm")))
    assert r.status_code == 200, r.text
    inc = r.json()["incumbent"]
    assert inc["decision"] == "switch"
    assert inc["rank"] is None and inc["cv"] is None and inc["difference"] is None
    assert "'pipe_diameter_mm'" in inc["reason"] and "not in this data" in inc["reason"]
    assert inc["specification"]["predictors"][2]["column"] == "pipe_diameter_mm"


def test_incumbent_outside_its_transform_domain_is_switched_with_reason(client):
    # 1/age is undefined for new mains (age 0): the incumbent cannot be fitted on this data
    r = client.post(URL, json=_request(_spec("log", "log", "reciprocal")))
    assert r.status_code == 200, r.text
    inc = r.json()["incumbent"]
    assert inc["decision"] == "switch"
    assert inc["cv"] is None
    assert "cannot be fitted" in inc["reason"] and "pipe_age_years" in inc["reason"]


@pytest.mark.parametrize(
    "incumbent,pointer",
    [
        pytest.param(
            _spec("log", "log", extra="pipe_age_years_copy"), None, id="unknown-but-absent"
        ),
        pytest.param(
            {**_spec(), "response": {"column": "pipe_age_years"}},
            "/incumbent/response/column",
            id="other-response",
        ),
    ],
)
def test_incumbent_problems_the_caller_must_fix(client, incumbent, pointer):
    body = _request(incumbent)
    if pointer is None:
        # a column that is in the table but not among the predictors cannot be scored on the
        # same rows: the caller is told to add it
        body["data"] = {"columns": {**COLUMNS, "pipe_age_years_copy": COLUMNS["pipe_age_years"]}}
        pointer = "/incumbent/predictors/2/column"
    r = client.post(URL, json=body)
    assert r.status_code == 422, r.text
    assert r.headers["content-type"].startswith("application/problem+json")
    assert pointer in [e["pointer"] for e in r.json()["errors"]]


def test_score_and_decide_in_process_follow_the_paired_rule():
    """The module's own steps without HTTP: the incumbent's fold errors equal scikit-learn's
    refits, and the paired standard error is sd(d) / sqrt(K) of the fold differences."""
    import statistics

    from service.core import transforms as tr
    from service.core.data import prepare
    from service.core.folds import make_plan
    from service.core.spec import Specification
    from service.selection.incumbent import decide, incumbent_spec, score

    prep = prepare({"columns": COLUMNS}, "repair_cost", ["pipe_length_m", "pipe_age_years"])
    plan = make_plan(prep.n, 5, 1, seed=3)
    spec, why = incumbent_spec(spec_of(_spec()), prep, list(prep.predictors))
    assert why is None
    cv = score(spec, prep, plan, tr.needs_shift(prep.y))
    raw = _fold_rmse(log_scale=False)
    # source: scikit-learn LinearRegression refits on KFold(5, shuffle=True, random_state=3)
    assert cv.fold_values == pytest.approx(raw, rel=1e-9)
    winner = _fold_rmse(log_scale=True)
    logged = Specification(spec.response, tr.Transform("log"), spec.predictors, spec.intercept)
    entry = SimpleNamespace(specification=logged, equation="log model", conditions=None)
    out = decide(spec, cv, None, 2, entry, winner, plan)
    d = winner - raw
    # source: Python's statistics.mean / statistics.stdev of the paired fold differences
    assert out.difference.value == pytest.approx(statistics.mean(d.tolist()), rel=1e-12)
    se = statistics.stdev(d.tolist()) / math.sqrt(5)
    assert out.difference.std_error == pytest.approx(se, rel=1e-12)
    # source: the simulation's construction (the data are generated on the log scale)
    assert out.decision == "switch" and "lower cross-validated rmse" in out.reason
