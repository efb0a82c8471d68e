"""Predictions from a model artifact, checked against references outside the service.

References: lognormal moments (mean exp(mu + sigma^2/2)); Duan (1983) smearing
written out in the test; statsmodels ``get_prediction(...).summary_frame``
for the model-scale prediction interval; simulation against known truth for
coverage.
"""

from __future__ import annotations

import copy
import json
import math

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from service.api.artifact import load_model
from service.api.render import contract
from service.core import retransform
from service.core import transforms as tr
from service.core.data import prepare
from service.core.errors import Cell, DataColumn, InputError, Location, Option, Table
from service.core.model import build_model
from service.core.predict import predict
from service.selection.entries import fitted_model

from tests.typed import spec_of


@pytest.fixture
def rng():
    return np.random.default_rng(7)


def issue(
    data: dict,
    response: str,
    preds: list[tuple[str, dict]],
    rt: dict,
    categorical: list[str] | None = None,
):
    """Fit in process and return (artifact after a JSON round trip, concrete spec, fit, prep)."""
    prep = prepare({"columns": data}, response, [c for c, _ in preds], categorical)
    spec = spec_of(
        {
            "response": {"column": response, "transform": rt},
            "predictors": [{"column": c, "transform": t} for c, t in preds],
        }
    )
    concrete, design, fit, _ = fitted_model(spec, prep)
    art = contract(build_model(concrete, design, fit, prep, "test"))
    return json.loads(json.dumps(art, allow_nan=False)), concrete, fit, prep


def column(out: dict, key: str) -> np.ndarray:
    return np.array([np.nan if p[key] is None else p[key] for p in out["predictions"]])


def strict_json(out: dict) -> None:
    json.dumps(out, allow_nan=False)  # raises on NaN/Infinity


def log_data(rng, n, sigma=0.4):
    x = rng.uniform(0, 2, n)
    y = np.exp(1.0 + 0.8 * x + rng.normal(0, sigma, n))
    return x, y


# ------------------------------------------------------------ references
def test_smearing_mean_matches_lognormal_mean_on_large_sample(rng):
    n, sigma = 20_000, 0.5
    x, y = log_data(rng, n, sigma)
    art, *_ = issue(
        {"y": y.tolist(), "x": x.tolist()}, "y", [("x", {"name": "identity"})], {"name": "log"}
    )
    assert art["residuals"]["kind"] == "quantiles"  # stored as 2000 quantiles for large n
    x0 = np.array([0.25, 1.0, 1.75])
    out = contract(predict(load_model(art), {"columns": {"x": x0.tolist()}}))
    mean = column(out, "mean")
    # source: standard lognormal moments E y = exp(mu + sigma^2/2); Duan (1983) smearing
    # estimates it.  Tolerance 2%: about 4 standard errors of mean(exp(e)) at n = 20000.
    truth = np.exp(1.0 + 0.8 * x0 + sigma**2 / 2)
    np.testing.assert_allclose(mean, truth, rtol=0.02)
    # and the median is exp(mu) (a monotone map keeps quantiles), same tolerance
    np.testing.assert_allclose(column(out, "median"), np.exp(1.0 + 0.8 * x0), rtol=0.02)


def test_quantile_residuals_reproduce_full_smearing(rng):
    x, y = log_data(rng, 9000, 0.7)
    art, _spec, fit, _ = issue(
        {"y": y.tolist(), "x": x.tolist()}, "y", [("x", {"name": "identity"})], {"name": "log"}
    )
    out = contract(predict(load_model(art), {"columns": {"x": [0.5, 1.5]}}))
    eta = fit.coef[0] + fit.coef[1] * np.array([0.5, 1.5])
    full = np.exp(eta) * np.mean(np.exp(fit.resid))  # Duan (1983) over all residuals
    np.testing.assert_allclose(column(out, "mean"), full, rtol=1e-3)


def test_prediction_interval_coverage_on_fresh_data(rng):
    x, y = log_data(rng, 1000)
    art, *_ = issue(
        {"y": y.tolist(), "x": x.tolist()}, "y", [("x", {"name": "identity"})], {"name": "log"}
    )
    xf, yf = log_data(rng, 2000)
    out = contract(predict(load_model(art), {"columns": {"x": xf.tolist()}}, 0.95))
    lo, hi, med = column(out, "lower"), column(out, "upper"), column(out, "median")
    cover = float(np.mean((yf >= lo) & (yf <= hi)))
    # source: binomial sd of a coverage proportion; nominal 0.95, 2000 fresh points
    assert abs(cover - 0.95) <= 3 * math.sqrt(0.95 * 0.05 / 2000), cover
    below = float(np.mean(yf <= med))  # the naive inverse is the median (METHODS.md section 4)
    assert abs(below - 0.5) <= 3 * math.sqrt(0.25 / 2000), below
    print(f"coverage {cover:.4f}, below median {below:.4f}")


@pytest.mark.parametrize("level", [0.5, 0.9, 0.95, 0.99])
def test_model_scale_interval_equals_statsmodels(rng, level):
    x1 = rng.uniform(0, 3, 80)
    x2 = rng.uniform(1, 5, 80)
    y = np.exp(0.3 + 0.5 * x1 - 0.2 * np.log(x2) + rng.normal(0, 0.3, 80))
    art, *_ = issue(
        {"y": y.tolist(), "x1": x1.tolist(), "x2": x2.tolist()},
        "y",
        [("x1", {"name": "identity"}), ("x2", {"name": "log"})],
        {"name": "log"},
    )
    ref = sm.OLS(np.log(y), sm.add_constant(np.column_stack([x1, np.log(x2)]))).fit()
    new1, new2 = np.array([0.1, 1.5, 2.9, 4.0]), np.array([1.2, 3.0, 4.9, 0.5])
    X0 = sm.add_constant(np.column_stack([new1, np.log(new2)]), has_constant="add")
    frame = ref.get_prediction(X0).summary_frame(alpha=1 - level)
    out = contract(
        predict(load_model(art), {"columns": {"x1": new1.tolist(), "x2": new2.tolist()}}, level)
    )
    zs = [p["model_scale"] for p in out["predictions"]]
    # source: statsmodels get_prediction(...).summary_frame obs_ci_lower / obs_ci_upper
    np.testing.assert_allclose([z["mean"] for z in zs], frame["mean"], rtol=1e-10)
    np.testing.assert_allclose([z["interval_low"] for z in zs], frame["obs_ci_lower"], rtol=1e-10)
    np.testing.assert_allclose([z["interval_high"] for z in zs], frame["obs_ci_upper"], rtol=1e-10)
    # back-transformed at the end points (exp is increasing)
    np.testing.assert_allclose(column(out, "lower"), np.exp(frame["obs_ci_lower"]), rtol=1e-10)
    np.testing.assert_allclose(column(out, "upper"), np.exp(frame["obs_ci_upper"]), rtol=1e-10)
    np.testing.assert_allclose(column(out, "median"), np.exp(frame["mean"]), rtol=1e-10)


def test_median_not_above_mean_for_log_models(rng):
    x, y = log_data(rng, 300, 0.6)
    art, *_ = issue(
        {"y": y.tolist(), "x": x.tolist()}, "y", [("x", {"name": "identity"})], {"name": "log"}
    )
    out = contract(predict(load_model(art), {"columns": {"x": np.linspace(-1, 3, 50).tolist()}}))
    # source: Jensen's inequality: mean(exp(e)) >= exp(mean(e)) = 1 with an intercept
    assert np.all(column(out, "median") <= column(out, "mean"))
    assert np.all(column(out, "lower") < column(out, "median"))
    assert np.all(column(out, "median") < column(out, "upper"))


def test_reciprocal_response_swaps_end_points(rng):
    x = rng.uniform(1, 4, 100)
    y = 1 / (0.5 + 0.2 * x + rng.normal(0, 0.02, 100))
    art, *_ = issue(
        {"y": y.tolist(), "x": x.tolist()},
        "y",
        [("x", {"name": "identity"})],
        {"name": "reciprocal"},
    )
    ref = sm.OLS(1 / y, sm.add_constant(x)).fit()
    x0 = np.array([1.5, 3.0])
    frame = ref.get_prediction(sm.add_constant(x0, has_constant="add")).summary_frame(alpha=0.05)
    out = contract(predict(load_model(art), {"columns": {"x": x0.tolist()}}))
    # source: METHODS.md section 4: swap the end points when g decreases
    np.testing.assert_allclose(column(out, "lower"), 1 / frame["obs_ci_upper"], rtol=1e-10)
    np.testing.assert_allclose(column(out, "upper"), 1 / frame["obs_ci_lower"], rtol=1e-10)
    np.testing.assert_allclose(column(out, "median"), 1 / frame["mean"], rtol=1e-10)


def test_unbounded_end_point_is_null_with_warning(rng):
    x = rng.uniform(1, 4, 60)
    y = 1 / (0.05 + 0.2 * x + rng.normal(0, 0.2, 60)) ** 1
    y = np.abs(y)
    art, *_ = issue(
        {"y": y.tolist(), "x": x.tolist()},
        "y",
        [("x", {"name": "identity"})],
        {"name": "reciprocal"},
    )
    out = contract(predict(load_model(art), {"columns": {"x": [1.0, 4.0]}}))
    strict_json(out)
    ups = [p["upper"] for p in out["predictions"]]
    assert None in ups  # the 1/y interval reaches 0: y unbounded above
    assert any("upper prediction limit is null" in w for w in out["warnings"])


def test_sqrt_model_mean_is_smearing_written_out(rng):
    x = rng.uniform(0, 5, 150)
    y = (1 + 0.6 * x + rng.normal(0, 0.4, 150)).clip(0) ** 2
    art, _spec, fit, _ = issue(
        {"y": y.tolist(), "x": x.tolist()}, "y", [("x", {"name": "identity"})], {"name": "sqrt"}
    )
    x0 = np.array([0.0, 2.5, 5.0])
    out = contract(predict(load_model(art), {"columns": {"x": x0.tolist()}}))
    eta = fit.coef[0] + fit.coef[1] * x0
    # source: Duan (1983): mean_i g^-1(eta + e_i), with g^-1(z) = max(z, 0)^2
    want = [np.mean(np.maximum(e0 + fit.resid, 0) ** 2) for e0 in eta]
    np.testing.assert_allclose(column(out, "mean"), want, rtol=1e-10)
    np.testing.assert_allclose(column(out, "median"), np.maximum(eta, 0) ** 2, rtol=1e-12)


@pytest.mark.parametrize(
    "rt",
    [
        pytest.param({"name": "identity"}, id="identity"),
        pytest.param({"name": "log"}, id="log"),
        pytest.param({"name": "sqrt"}, id="sqrt"),
        pytest.param({"name": "box_cox"}, id="box_cox"),
        pytest.param({"name": "yeo_johnson"}, id="yeo_johnson"),
        pytest.param({"name": "power", "exponent": -0.5}, id="power -0.5"),
    ],
)
def test_artifact_reproduces_in_process_fit(rng, rt):
    n = 90
    x = rng.uniform(1, 6, n)
    site = rng.choice(["a", "b", "c"], n)
    y = np.exp(0.5 + 0.3 * x + (site == "b") * 0.2 + rng.normal(0, 0.2, n))
    data = {"y": y.tolist(), "x": x.tolist(), "site": site.tolist()}
    art, spec, fit, _prep = issue(
        data, "y", [("x", {"name": "log"}), ("site", {"name": "categorical"})], rt
    )
    out = contract(predict(load_model(art), {"columns": {"x": x.tolist(), "site": site.tolist()}}))
    t = spec.response_transform
    np.testing.assert_allclose(column(out, "median"), t.inverse(fit.fitted), rtol=1e-12)
    np.testing.assert_allclose(
        column(out, "mean"), retransform.smeared_mean(t, fit.fitted, fit.resid), rtol=1e-9
    )
    assert not any(p["extrapolation"] for p in out["predictions"])
    # statsmodels fitted values on the model scale (independent fit)
    z = t.forward(y)
    X = np.column_stack([np.ones(n), np.log(x), site == "b", site == "c"]).astype(float)
    ref = sm.OLS(z, X).fit()
    np.testing.assert_allclose(
        [p["model_scale"]["mean"] for p in out["predictions"]],
        ref.fittedvalues,
        rtol=1e-8,
        atol=1e-10,
    )


def test_rows_come_back_in_input_order(rng):
    x, y = log_data(rng, 50)
    art, *_ = issue(
        {"y": y.tolist(), "x": x.tolist()}, "y", [("x", {"name": "identity"})], {"name": "log"}
    )
    m = load_model(art)
    x0 = np.array([0.3, 1.9, 0.7, 1.1])
    a = column(contract(predict(m, {"columns": {"x": x0.tolist()}})), "median")
    perm = [2, 0, 3, 1]
    b = column(contract(predict(m, {"records": [{"x": float(x0[i])} for i in perm]})), "median")
    np.testing.assert_allclose(b, a[perm], rtol=0)
    c = column(
        contract(predict(m, {"csv": "x\n" + "\n".join(str(v) for v in x0) + "\n"})), "median"
    )
    np.testing.assert_allclose(c, a, rtol=1e-15)


# ---------------------------------------------------------- extrapolation
def test_extrapolation_by_range_and_by_leverage(rng):
    n = 200
    x1 = rng.uniform(0, 10, n)
    x2 = x1 + rng.normal(0, 0.5, n)  # strongly correlated: the corners are far from the data
    y = 2 + x1 + x2 + rng.normal(0, 1, n)
    art, *_ = issue(
        {"y": y.tolist(), "x1": x1.tolist(), "x2": x2.tolist()},
        "y",
        [("x1", {"name": "identity"}), ("x2", {"name": "identity"})],
        {"name": "identity"},
    )
    corner = (float(x1.min()) + 0.1, float(x2.max()) - 0.1)  # inside both ranges
    out = contract(
        predict(
            load_model(art),
            {"columns": {"x1": [5.0, 20.0, corner[0]], "x2": [5.0, 5.0, corner[1]]}},
        )
    )
    p = out["predictions"]
    assert p[0]["extrapolation"] is False
    assert p[1]["extrapolation"] is True and "training range" in p[1]["extrapolation_reasons"][0]
    assert p[2]["extrapolation"] is True
    assert any("leverage" in r for r in p[2]["extrapolation_reasons"])  # METHODS.md section 9
    assert any("extrapolation" in w for w in out["warnings"])


# ---------------------------------------------------------------- loading
@pytest.fixture
def artifact(rng):
    return income_site_artifact(rng)


def income_site_artifact(rng: np.random.Generator) -> dict:
    """Invented: a log model of a cost on income (log) and site, as issued."""
    n = 60
    x = rng.uniform(1, 5, n)
    site = rng.choice(["north", "south"], n)
    y = np.exp(0.2 + 0.5 * np.log(x) + (site == "south") * 0.3 + rng.normal(0, 0.2, n))
    art, *_ = issue(
        {"y": y.tolist(), "income": x.tolist(), "site": site.tolist()},
        "y",
        [("income", {"name": "log"}), ("site", {"name": "categorical"})],
        {"name": "log"},
    )
    return art


def where_of(exc: pytest.ExceptionInfo) -> list[Location]:
    """Where each problem is (the web layer spells these as JSON Pointers)."""
    return [p.where for p in exc.value.problems]


# ------------------------------------------------------------- new rows
@pytest.mark.parametrize(
    "data, where",
    [
        pytest.param(
            {"columns": {"site": ["north"]}}, DataColumn("income", "columns"), id="missing column"
        ),
        pytest.param(
            {"columns": {"income": [1.0, None], "site": ["north", "south"]}},
            Cell("income", 1, "columns"),
            id="missing value",
        ),
        pytest.param(
            {"columns": {"income": [1.0, "x"], "site": ["north", "south"]}},
            Cell("income", 1, "columns"),
            id="text in numeric",
        ),
        pytest.param(
            {"columns": {"income": [0.0, 2.0], "site": ["north", "south"]}},
            Cell("income", 0, "columns"),
            id="log of zero",
        ),
        pytest.param(
            {"columns": {"income": [2.0, -1.0], "site": ["north", "south"]}},
            Cell("income", 1, "columns"),
            id="log of negative",
        ),
        pytest.param(
            {"columns": {"income": [2.0, 3.0], "site": ["north", "east"]}},
            Cell("site", 1, "columns"),
            id="unseen level",
        ),
        pytest.param(
            {"columns": {"income": [2.0], "site": [None]}},
            Cell("site", 0, "columns"),
            id="missing level",
        ),
        pytest.param(
            {"records": [{"income": 2.0, "site": "north"}, {"site": "south"}]},
            Cell("income", 1, "records"),
            id="record without field",
        ),
        pytest.param(
            {"records": [{"income": 2.0, "site": "north"}, {"income": -2, "site": "south"}]},
            Cell("income", 1, "records"),
            id="record log of negative",
        ),
        pytest.param(
            {"csv": "income,site\n2,north\n-1,south\n"}, Cell("income", 1, "csv"), id="csv"
        ),
        pytest.param({"columns": {"income": [], "site": []}}, Table(), id="no rows"),
    ],
)
def test_unusable_rows_point_at_the_cell(artifact, data, where):
    m = load_model(artifact)
    with pytest.raises(InputError) as exc:
        contract(predict(m, data))
    assert where_of(exc)[0] == where


def test_every_bad_cell_is_listed(artifact):
    m = load_model(artifact)
    with pytest.raises(InputError) as exc:
        contract(
            predict(
                m, {"columns": {"income": [0.0, 1.0, -3.0], "site": ["north", "west", "south"]}}
            )
        )
    assert sorted(where_of(exc), key=repr) == [
        Cell("income", 0, "columns"),
        Cell("income", 2, "columns"),
        Cell("site", 1, "columns"),
    ]


@pytest.mark.parametrize("level", [0.0, 1.0, -0.5, 1.5])
def test_interval_outside_unit_interval(artifact, level):
    with pytest.raises(InputError) as exc:
        contract(
            predict(load_model(artifact), {"columns": {"income": [2.0], "site": ["north"]}}, level)
        )
    assert where_of(exc) == [Option("interval")]


@pytest.mark.parametrize(
    "t",
    [
        pytest.param(tr.Transform("log", shift=0.0), id="log"),
        pytest.param(tr.Transform("log", shift=2.5), id="log shift"),
        pytest.param(tr.Transform("sqrt"), id="sqrt"),
        pytest.param(tr.Transform("square"), id="square"),
        pytest.param(tr.Transform("reciprocal"), id="reciprocal"),
        pytest.param(tr.Transform("power", exponent=0.5), id="power 0.5"),
        pytest.param(tr.Transform("power", exponent=-2.0), id="power -2"),
        pytest.param(tr.Transform("box_cox", lam=0.3), id="box_cox"),
        pytest.param(tr.Transform("yeo_johnson", lam=0.3), id="yeo_johnson"),
        pytest.param(tr.Transform("identity"), id="identity"),
    ],
)
def test_domain_mask_agrees_with_cell_by_cell_check(t):
    x = np.array([-3.0, -2.5, -1.0, -0.0, 0.0, 1e-300, 0.5, 2.0, 7.0, -2.5])
    with np.errstate(all="ignore"):  # what new rows are refused for: outside, or overflowing
        mask = ~t.domain_mask(x) | ~np.isfinite(t.forward(x))
    with np.errstate(all="ignore"):
        want = np.array(
            [
                t.domain_problem(np.array([v]), "x", "predictor") is not None
                or not np.isfinite(t.forward(np.array([v]))[0])
                for v in x
            ]
        )
    np.testing.assert_array_equal(mask, want)


def test_unbounded_box_cox_mean_and_limits_never_nan(rng):
    x = rng.uniform(0, 1, 80)
    y = (1 + -0.8 * (0.2 + 0.9 * x + rng.normal(0, 0.1, 80))) ** (-1 / 0.8)
    art, *_ = issue(
        {"y": y.tolist(), "x": x.tolist()}, "y", [("x", {"name": "identity"})], {"name": "box_cox"}
    )
    m = load_model(art)
    out = contract(predict(m, {"columns": {"x": np.linspace(-5, 5, 11).tolist()}}))
    strict_json(out)
    assert out["warnings"]  # extrapolations and, far out, null end points are explained
    for p in out["predictions"]:
        for k in ("mean", "median", "lower", "upper"):
            assert p[k] is None or math.isfinite(p[k])


def test_same_artifact_loaded_twice_is_unchanged(artifact):
    before = copy.deepcopy(artifact)
    load_model(artifact)
    assert artifact == before
    assert stats.t.ppf(0.975, artifact["df_residual"]) > 1.96  # t quantile above the normal one
