"""Contract form of a candidate's cross-validated error."""

import numpy as np
import pytest
from service.api.render.cv import cv
from service.core.crossval import cross_validate
from service.core.cvresult import CVReport
from service.core.data import prepare
from service.core.folds import make_plan
from service.core.spec import build_design
from sklearn.linear_model import LinearRegression

from tests.typed import spec_of


def test_cv_block_states_the_error_its_scheme_and_the_back_transform():
    rng = np.random.default_rng(11)
    x = rng.uniform(0, 10, 50)
    y = 1.0 + 0.5 * x + rng.normal(0, 1.0, 50)
    prep = prepare({"columns": {"y": y.tolist(), "x": x.tolist()}}, "y", ["x"])
    spec = spec_of(
        {
            "response": {"column": "y", "transform": {"name": "identity"}},
            "predictors": [{"column": "x", "transform": {"name": "identity"}}],
        }
    )
    plan = make_plan(prep.n, 5, 1, 0, "rmse", "random")
    res = cross_validate(build_design(spec, prep).X, prep.y, spec.response_transform, plan, False)
    out = cv(CVReport.of(res, plan))
    # source: scikit-learn LinearRegression refitted on the same five training folds;
    # the pooled RMSE of every held-out row
    sq, ab, pc = [], [], []
    for k in range(5):
        test = plan.assignments[0] == k
        m = LinearRegression().fit(x[~test, None], y[~test])
        e = y[test] - m.predict(x[test, None])
        sq.append(e**2)
        ab.append(np.abs(e))
        pc.append(np.abs(e / y[test]))
    assert out["value"] == pytest.approx(float(np.sqrt(np.mean(np.concatenate(sq)))), rel=1e-10)
    assert list(out["all_metrics"]) == ["rmse", "mae", "mape"]
    assert out["all_metrics"]["rmse"] == out["value"]
    # source: the same scikit-learn fits; identity response, so median = mean prediction
    assert out["all_metrics"]["mae"] == pytest.approx(float(np.mean(np.concatenate(ab))), rel=1e-10)
    want_mape = 100.0 * float(np.mean(np.concatenate(pc)))
    assert out["all_metrics"]["mape"] == pytest.approx(want_mape, rel=1e-10)
    assert (out["folds"], out["repeats"], out["seed"], out["scheme"]) == (5, 1, 0, "random")
    assert out["scale"] == "original" and out["metric"] == "rmse"
    assert out["back_transform"] == "smeared mean (Duan 1983)"
