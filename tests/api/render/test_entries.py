"""Contract form of a ranking entry (service/api/render/entries.py): the entry in the
documented order, its fit block and inference (against statsmodels on the engel data), the
score parts and the estimates."""

from dataclasses import replace

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from service.api.encode import to_jsonable
from service.api.render import contract
from service.core import boxtidwell as bt
from service.core.cvresult import CVResult
from service.core.data import prepare
from service.core.likelihood import estimate_lambda
from service.core.spec import PredictorSpec, Specification
from service.selection.diagnose import diagnose_specification
from service.selection.entries import (
    ConditionCount,
    Estimates,
    Inference,
    LadderReading,
    Score,
    ScoreParts,
    Simplicity,
)
from service.selection.search import IN_BAND_RULE, OUT_OF_BAND_RULE, rank
from service.selection.search_setup import Scored, SearchOptions

from tests.typed import sent, tf

RANKED_KEYS = [
    "cv_value",
    "cv_std_error",
    "best_cv_value",
    "difference_from_best",
    "paired_std_error",
    "one_se_threshold",
    "within_one_se",
    "simplicity",
    "rule",
]


def _scored(resp: str, pred: str, folds: list[float]) -> Scored:
    spec = Specification("y", tf({"name": resp}), (PredictorSpec("x", tf({"name": pred})),))
    fv = np.asarray(folds, float)
    # source: scipy.stats.sem for the standard error of the K fold errors
    value, se = float(fv.mean()), float(stats.sem(fv))
    return Scored(spec, CVResult("rmse", value, se, fv, {"rmse": value}))


def test_ranked_parts_render_in_the_documented_order_with_reference_numbers():
    best = _scored("log", "log", [9.5, 10.5, 9.8, 10.2, 10.0])
    noisy = _scored("identity", "identity", [5, 16, 7, 14, 11])
    ranked, lowest = rank([best, noisy], folds=5)
    by = {id(s): contract(p) for s, p in ranked}
    out = by[id(noisy)]
    assert list(out) == RANKED_KEYS
    # source: scipy.stats.sem of the paired fold differences (standard error of a mean of
    # K paired differences)
    diff = noisy.cv.fold_values - best.cv.fold_values
    assert out["paired_std_error"] == pytest.approx(stats.sem(diff), rel=1e-12)
    assert out["difference_from_best"] == pytest.approx(np.mean(diff), rel=1e-12)
    # source: Hastie, Tibshirani & Friedman (2009) sec. 7.10: lowest error plus its
    # standard error
    assert out["one_se_threshold"] == pytest.approx(10.0 + stats.sem(best.cv.fold_values))
    assert out["best_cv_value"] == lowest == pytest.approx(10.0)
    assert out["within_one_se"] is False and out["rule"] == OUT_OF_BAND_RULE
    assert by[id(best)]["rule"] == IN_BAND_RULE
    # log response and log predictor: nothing estimated, two transformed columns
    assert by[id(best)]["simplicity"] == {
        "estimated": 0,
        "readability": Specification.simplicity(best.spec)[1],
        "transformed_columns": 2,
    }


def test_compared_conditions_follow_the_rule_and_only_once_compared():
    parts = ScoreParts(2.0, 0.5, 2.0, 2.5, True, Simplicity(0, 1, 1), "r", 0.0, 0.0)
    assert "conditions_failed" not in contract(parts)
    compared = ScoreParts(
        **{**parts.__dict__, "conditions": ConditionCount(("normality",), ("normality", "x"))}
    )
    out = contract(compared)
    assert list(out)[-2:] == ["conditions_failed", "conditions_not_holding"]
    assert out["conditions_failed"] == ["normality"]
    assert out["conditions_not_holding"] == ["normality", "x"]
    failed_fit = ScoreParts(
        **{**parts.__dict__, "conditions": ConditionCount(None, note="singular design")}
    )
    out = contract(failed_fit)
    assert out["conditions_failed"] is None and out["conditions_note"] == "singular design"
    assert "conditions_not_holding" not in out


def test_a_single_specifications_score_has_no_distance_from_a_best():
    parts = ScoreParts(
        3.0, 0.2, 3.0, 3.2, True, Simplicity(1, 2, 1), "alone", conditions=ConditionCount(())
    )
    out = to_jsonable({"score": Score(1.0, parts)})["score"]
    assert out["cv_ratio"] == 1.0
    assert list(out["parts"]) == [
        "cv_value",
        "cv_std_error",
        "best_cv_value",
        "one_se_threshold",
        "within_one_se",
        "simplicity",
        "rule",
        "conditions_failed",
    ]
    assert out["parts"]["conditions_failed"] == []


ENTRY_KEYS = [
    "specification",
    "equation",
    "cv",
    "fit",
    "coefficients",
    "score",
    "model",
    "warnings",
    "conditions",
    "transform_hints",
    "inference",
    "interpretation",
]


@pytest.fixture(scope="module")
def engel_entry():
    d = sm.datasets.engel.load_pandas().data  # source: statsmodels.datasets.engel
    prep = prepare(
        {"columns": {"foodexp": d.foodexp.tolist(), "income": d.income.tolist()}},
        "foodexp",
        ["income"],
    )
    spec = {
        "response": {"column": "foodexp", "transform": {"name": "log"}},
        "predictors": [{"column": "income", "transform": {"name": "log"}}],
    }
    entry, _ = diagnose_specification(prep, sent(spec), SearchOptions(), "test")
    return entry, d


def test_an_entry_renders_in_the_documented_order_with_statsmodels_numbers(engel_entry):
    entry, d = engel_entry
    out = to_jsonable(entry)
    assert list(out) == ENTRY_KEYS  # diagnosed alone: no rank, nothing estimated
    y = d.foodexp.to_numpy()
    ref = sm.OLS(np.log(y), sm.add_constant(np.log(d.income.to_numpy()))).fit()
    fit = out["fit"]
    # source: statsmodels OLS on log(foodexp) ~ log(income); the log-likelihood of y adds
    # the Jacobian of the log, -sum(log y); AIC/BIC count two coefficients and sigma
    llf_y = ref.llf - np.sum(np.log(y))
    assert fit["n"] == 235 and fit["df_residual"] == ref.df_resid
    assert fit["r_squared"] == pytest.approx(ref.rsquared, rel=1e-9)
    assert fit["adj_r_squared"] == pytest.approx(ref.rsquared_adj, rel=1e-9)
    assert fit["log_likelihood_original_scale"] == pytest.approx(llf_y, rel=1e-9)
    assert fit["aic_original_scale"] == pytest.approx(-2 * llf_y + 2 * 3, rel=1e-9)
    assert fit["bic_original_scale"] == pytest.approx(-2 * llf_y + 3 * np.log(235), rel=1e-9)
    assert fit["parameters_counted"] == 3 and fit["r_squared_scale"] == "model"
    assert fit["residual_sd"] == pytest.approx(np.sqrt(ref.scale), rel=1e-9)
    # source: CHECKS_PUBLIC engel log-log, Breusch-Pagan Koenker p 1.769e-4: equal variance
    # fails, so the readings use HC3 standard errors (statsmodels cov_type HC3)
    inference = out["inference"]
    assert inference["standard_errors"] == "hc3" and "hac_lags" not in inference
    assert list(inference)[-2:] == ["prediction_intervals", "prediction_interval_reason"]
    hc3 = ref.get_robustcov_results(cov_type="HC3")
    assert out["coefficients"][1]["std_error_hc3"] == pytest.approx(hc3.bse[1], rel=1e-9)
    assert "equal_variance" in out["score"]["parts"]["conditions_failed"]
    assert out["specification"]["response"]["transform"] == {"name": "log"}
    ranked = to_jsonable(replace(entry, rank=2))
    assert list(ranked) == ["rank", *ENTRY_KEYS] and ranked["rank"] == 2


def test_inference_with_an_order_names_its_lags_and_their_rule():
    out = contract(Inference("hac", "why", "src", 4).with_intervals("normal", "because"))
    assert list(out) == [
        "standard_errors",
        "reason",
        "source",
        "hac_lags",
        "hac_lag_rule",
        "prediction_intervals",
        "prediction_interval_reason",
    ]
    # common practice: floor(4 (n/100)^(2/9)) lags
    assert out["hac_lags"] == 4 and "common practice" in out["hac_lag_rule"]


def test_estimates_render_the_lambda_its_folds_and_the_ladder_readings():
    rng = np.random.default_rng(4)
    y = rng.lognormal(2.0, 0.4, 200)
    lam = estimate_lambda("box_cox", y, np.ones((y.size, 1)))
    # source: scipy.stats.boxcox, the maximum-likelihood lambda of y alone
    assert lam.lam == pytest.approx(stats.boxcox(y)[1], abs=1e-4)
    x = rng.uniform(1, 10, 200)
    z = 1 + 2 * np.sqrt(x) + rng.normal(0, 0.05, 200)
    power = bt.estimate_powers(z, np.ones((x.size, 1)), x).summary(0)
    reading = LadderReading(power, "sqrt(x)", 3.5, "x")
    est = Estimates(replace(lam, per_fold=(0.1, 0.2)), {"x": power}, (reading,))
    out = to_jsonable(est)
    assert list(out) == ["response_lambda", "predictor_powers", "read_as_ladder"]
    assert out["response_lambda"]["lambda"] == lam.lam
    assert list(out["response_lambda"])[-1] == "per_fold"
    assert out["response_lambda"]["per_fold"] == [0.1, 0.2]
    # source: simulation truth, z linear in x^0.5
    assert out["predictor_powers"]["x"]["power"] == pytest.approx(0.5, abs=0.05)
    (read,) = out["read_as_ladder"]
    assert list(read)[:2] == ["parameter", "column"] and read["column"] == "x"
    assert read["power"] == power.power and read["read_as"] == "sqrt(x)"
    assert read["cv_value_estimated"] == 3.5
    # no folds estimated the lambda: no per_fold list
    assert "per_fold" not in to_jsonable(Estimates(lam))["response_lambda"]
