"""The condition statistics computed on our own least squares equal statsmodels' to 1e-8.

Every statistic in ``_condition_tests`` runs on one SVD of the design (plus small auxiliary
solves) instead of statsmodels refits; these checks put each next to the statsmodels function
its ``source`` field names, on random, badly scaled, collinear and certified designs.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
import statsmodels.api as sm
from service.core import _condition_tests as ct
from statsmodels.stats import diagnostic as smd

TOL = 1e-8


def _random(n: int, seed: int) -> tuple[np.ndarray, np.ndarray, bool]:
    rng = np.random.default_rng(seed)
    X = np.column_stack([np.ones(n), rng.normal(size=(n, 3)), rng.normal(size=n) > 0])
    z = X @ [1.0, 2.0, -1.0, 0.5, 1.0] + rng.normal(size=n) * (1 + np.abs(X[:, 1]))
    return z, X.astype(float), True


def _badly_scaled() -> tuple[np.ndarray, np.ndarray, bool]:
    rng = np.random.default_rng(3)
    X = np.column_stack([np.ones(200), rng.normal(size=200) * 1e6, rng.normal(size=200) * 1e-3 + 5])
    return X @ [1.0, 1e-6, 100.0] + rng.normal(size=200), X, True


def _longley() -> tuple[np.ndarray, np.ndarray, bool]:
    # source: Longley (1967) data as shipped by statsmodels (NIST StRD's Longley problem)
    d = sm.datasets.longley.load_pandas().data
    cols = ["GNPDEFL", "GNP", "UNEMP", "ARMED", "POP", "YEAR"]
    X = np.column_stack([np.ones(len(d)), d[cols].to_numpy()])
    return d["TOTEMP"].to_numpy(dtype=float), X, True


def _dummies_without_intercept() -> tuple[np.ndarray, np.ndarray, bool]:
    rng = np.random.default_rng(4)
    g = rng.integers(0, 3, 100)
    X = np.column_stack([(g == k).astype(float) for k in range(3)] + [rng.normal(size=100)])
    return X @ [1.0, 2.0, 3.0, 1.0] + rng.normal(size=100), X, False


CASES = {
    "random-40": _random(40, 0),
    "random-300": _random(300, 1),
    "random-3000": _random(3000, 2),
    "badly-scaled": _badly_scaled(),
    "longley": _longley(),
    "dummies-implicit-constant": _dummies_without_intercept(),
}


def _rel(a: float, b: float) -> float:
    return abs(a - b) / max(abs(b), 1e-300)


@pytest.fixture(params=sorted(CASES), ids=str)
def case(request):
    z, X, has_intercept = CASES[request.param]
    fit = ct.fit_model(z, X, has_intercept)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ref = sm.OLS(z, X).fit()
    return fit, ref


def test_fit_and_influence(case):
    fit, ref = case  # source: statsmodels OLS(pinv) and OLSInfluence
    infl = ref.get_influence()
    scale = np.max(np.abs(ref.fittedvalues))
    assert np.max(np.abs(fit.fitted - ref.fittedvalues)) <= TOL * scale
    assert fit.rank == ref.model.rank
    np.testing.assert_allclose(fit.influence.leverage, infl.hat_matrix_diag, atol=1e-10)
    np.testing.assert_allclose(
        fit.influence.standardized, infl.resid_studentized_internal, rtol=1e-7, atol=1e-9
    )
    cooks = infl.cooks_distance[0]
    np.testing.assert_allclose(fit.influence.cooks, cooks, rtol=1e-7, atol=1e-12 * cooks.max())


def test_reset(case):
    fit, ref = case
    out = ct.reset_test(fit)
    f = fit.fitted - fit.fitted.mean() if fit.spans_constant else fit.fitted
    f = f / np.sqrt(np.mean(f**2))
    # source: statsmodels OLS.compare_f_test of the model with the standardised powers added
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        big = sm.OLS(fit.z, np.column_stack([fit.X, f**2, f**3])).fit()
    F, p, df = big.compare_f_test(ref)
    assert _rel(out["statistic"], F) < TOL
    assert _rel(out["p_value"], p) < TOL
    assert out["df"] == [float(df), float(big.df_resid)]


def test_rainbow(case):
    fit, ref = case
    out = ct.rainbow_test(fit)
    # source: statsmodels.stats.diagnostic.linear_rainbow(use_distance=True)
    F, p = smd.linear_rainbow(ref, frac=0.5, use_distance=True)
    assert _rel(out["statistic"], F) < TOL
    assert _rel(out["p_value"], p) < TOL


def test_breusch_pagan(case):
    fit, _ = case
    Z = ct.standardized_regressors(fit)
    out = ct.breusch_pagan_test(fit, Z)
    # source: statsmodels.stats.diagnostic.het_breuschpagan(robust=True)
    lm, p, F, Fp = smd.het_breuschpagan(fit.resid, Z, robust=True)
    for got, want in [(out["statistic"], lm), (out["p_value"], p), (out["f_statistic"], F)]:
        assert _rel(got, want) < TOL
    assert _rel(out["f_p_value"], Fp) < TOL


def test_white(case):
    fit, _ = case
    Z = ct.standardized_regressors(fit)
    out = ct.white_test(fit, Z)
    if out["statistic"] is None:
        pytest.skip(out["reason"])  # e.g. Longley: 28 auxiliary columns for 16 rows
    i0, i1 = np.triu_indices(Z.shape[1])
    aux = Z[:, i0] * Z[:, i1]
    if np.linalg.matrix_rank(aux) < aux.shape[1]:
        # squares of a 0/1 column repeat it: statsmodels' pseudo-inverse then fits a
        # direction of rounding noise; compare on the auxiliary design's column space
        aux = ct.full_rank_columns(aux)
    # source: statsmodels.stats.diagnostic.het_white (same auxiliary regression)
    res = sm.OLS(fit.resid**2, aux).fit()
    lm = fit.n * res.rsquared
    assert _rel(out["statistic"], lm) < TOL
    assert _rel(out["f_statistic"], res.fvalue) < TOL
    assert _rel(out["p_value"], float(smd.stats.chi2.sf(lm, res.df_model))) < 1e-6


def test_white_equals_het_white_on_a_full_rank_design():
    z, X, _ = _random(500, 7)
    X = X[:, :4]  # continuous columns only: the auxiliary design has full rank
    fit = ct.fit_model(z, X, True)
    Z = ct.standardized_regressors(fit)
    out = ct.white_test(fit, Z)
    lm, p, F, _ = smd.het_white(fit.resid, Z)  # source: statsmodels het_white
    assert _rel(out["statistic"], lm) < TOL
    assert _rel(out["p_value"], p) < TOL
    assert _rel(out["f_statistic"], F) < TOL


def test_breusch_godfrey(case):
    fit, _ = case
    order = np.random.default_rng(1).permutation(fit.n)
    out = ct.breusch_godfrey_test(fit, order)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ro = sm.OLS(fit.z[order], fit.X[order]).fit()
        # source: statsmodels.stats.diagnostic.acorr_breusch_godfrey on the rows in order
        ref = smd.acorr_breusch_godfrey(ro, nlags=out["lags"], result_object=True)
    assert _rel(out["statistic"], ref.lm) < TOL
    assert _rel(out["f_statistic"], ref.fval) < TOL
    assert _rel(out["p_value"], ref.lmpval) < 1e-6


def test_ljung_box(case):
    fit, _ = case
    e = fit.resid[np.random.default_rng(2).permutation(fit.n)]
    out = ct.ljung_box_test(e)
    ref = smd.acorr_ljungbox(e, lags=out["lags"])  # source: statsmodels acorr_ljungbox
    assert _rel(out["statistic"], ref["lb_stat"].iloc[-1]) < TOL


def test_least_squares_rank_and_minimum_norm_solution():
    rng = np.random.default_rng(8)
    X = rng.normal(size=(50, 3))
    X = np.column_stack([X, X[:, 0] + X[:, 1]])  # exactly collinear fourth column
    y = rng.normal(size=50)
    ls = ct.LeastSquares.of(X)
    assert ls.rank == 3 == np.linalg.matrix_rank(X)
    # source: numpy.linalg.pinv gives the minimum-norm least-squares solution
    np.testing.assert_allclose(ls.coef(y), np.linalg.pinv(X) @ y, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(ls.hat().sum(), 3.0, rtol=1e-12)  # trace of a projector = rank
