"""Contract form of predictions: one row per new row, nulls where a value does not exist."""

import json

import numpy as np
import pytest
import statsmodels.api as sm
from service.api.artifact import load_model
from service.api.render import contract
from service.api.render.predictions import finite_list, predictions
from service.core.data import prepare
from service.core.model import build_model
from service.core.predict import predict
from service.selection.entries import fitted_model

from tests.typed import spec_of


def _model(y, x, rt):
    prep = prepare({"columns": {"y": y.tolist(), "x": x.tolist()}}, "y", ["x"])
    spec = spec_of(
        {
            "response": {"column": "y", "transform": rt},
            "predictors": [{"column": "x", "transform": {"name": "identity"}}],
        }
    )
    concrete, design, fit, _ = fitted_model(spec, prep)
    art = contract(build_model(concrete, design, fit, prep, "test"))
    return load_model(json.loads(json.dumps(art, allow_nan=False)))


def test_rows_match_statsmodels_prediction_intervals_on_an_untransformed_response():
    rng = np.random.default_rng(5)
    x = rng.uniform(0, 10, 60)
    y = 2.0 + 0.7 * x + rng.normal(0, 1.0, 60)
    new = np.array([1.0, 5.0, 12.0])
    out = predictions(predict(_model(y, x, {"name": "identity"}), {"columns": {"x": new.tolist()}}))
    # source: statsmodels OLS get_prediction, obs_ci_lower / obs_ci_upper at 95%
    frame = (
        sm.OLS(y, sm.add_constant(x))
        .fit()
        .get_prediction(sm.add_constant(new, has_constant="add"))
        .summary_frame(alpha=0.05)
    )
    rows = out["predictions"]
    assert [r["mean"] for r in rows] == pytest.approx(frame["mean"].to_numpy(), rel=1e-10)
    assert [r["lower"] for r in rows] == pytest.approx(frame["obs_ci_lower"].to_numpy(), rel=1e-10)
    assert [r["upper"] for r in rows] == pytest.approx(frame["obs_ci_upper"].to_numpy(), rel=1e-10)
    assert [r["model_scale"]["mean"] for r in rows] == [r["median"] for r in rows]
    # 12 lies beyond the largest training value (10): only that row is an extrapolation
    assert [r["extrapolation"] for r in rows] == [False, False, True]
    assert rows[2]["extrapolation_reasons"] and not rows[0]["extrapolation_reasons"]
    assert out["interval"] == 0.95 and out["interval_method"] == "normal"
    json.dumps(out, allow_nan=False)


def test_a_value_that_does_not_exist_is_null_never_nan():
    assert finite_list(np.array([1.0, np.nan, np.inf, -2.5])) == [1.0, None, None, -2.5]
    assert finite_list(np.array([0.5, 1.5])) == [0.5, 1.5]
