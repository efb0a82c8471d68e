"""Least squares (service/core/fitting.py) against certified values and reference libraries.

References: NIST StRD certified regressions 'Longley' (higher difficulty; values quoted from
memory, statsmodels reproduces them to 11-13 significant digits) and 'Norris' (lower
difficulty; the NIST file as scipy ships it in its test data, certified values read from that
file); statsmodels OLS (estimates, standard errors, R^2, log-likelihood, HC3 and HAC
covariances); numpy.linalg for the batched solver.

Tolerances (fixed in advance): NIST coefficients LRE >= 7 (Longley) and rel 1e-9 (Norris, a
well-conditioned problem); statsmodels rel 1e-9 on well-conditioned designs, rel 1e-8 for the
robust covariances.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest
import scipy.linalg
import scipy.stats
import statsmodels.api as sm
from service.core.errors import CandidateFailure
from service.core.fitting import (
    RobustCovariance,
    StandardErrors,
    hac_cov,
    hc3_cov,
    newey_west_lags,
    ols,
    qr_solve,
    solve_batch,
    solve_batch_nested,
    solve_batch_with_inverse_diagonal,
)

# ---------------------------------------------------------------- NIST StRD
LONGLEY_X = ["GNPDEFL", "GNP", "UNEMP", "ARMED", "POP", "YEAR"]
# source: NIST StRD 'Longley' certified values (from memory; statsmodels agrees to 11-13 digits)
LONGLEY_CERTIFIED = {
    "params": {
        "const": -3482258.63459582,
        "GNPDEFL": 15.0618722713733,
        "GNP": -0.035819179292591,
        "UNEMP": -2.02022980381683,
        "ARMED": -1.03322686717359,
        "POP": -0.0511041056535807,
        "YEAR": 1829.15146461355,
    },
    "bse": {
        "const": 890420.383607373,
        "GNPDEFL": 84.9149257747669,
        "GNP": 0.0334910077722432,
        "UNEMP": 0.488399681651699,
        "ARMED": 0.214274163161675,
        "POP": 0.22607320006937,
        "YEAR": 455.478499142212,
    },
    "residual_sd": 304.854073561965,
    "r_squared": 0.995479004577296,
    "ssr": 836424.055505915,
}


def _lre(b: float, c: float) -> float:
    """Log relative error (number of correct significant digits), as NIST StRD scores it."""
    return -math.log10(abs(b - c) / abs(c)) if b != c else 16.0


def test_longley_coefficients_match_nist_certified_values():
    from statsmodels.datasets import longley

    df = longley.load_pandas().data
    cert = LONGLEY_CERTIFIED
    X = np.column_stack([np.ones(len(df))] + [df[c].to_numpy(float) for c in LONGLEY_X])
    fit = ols(X, df["TOTEMP"].to_numpy(float), ["const", *LONGLEY_X], True)
    for name, b in zip(["const", *LONGLEY_X], fit.coef, strict=True):
        # source: NIST StRD Longley certified values (from memory); LRE >= 7 digits
        assert _lre(b, cert["params"][name]) >= 7.0, name
    for name, s in zip(["const", *LONGLEY_X], fit.se, strict=True):
        # source: NIST certified standard deviations of the estimates (from memory); rel 1e-7
        assert s == pytest.approx(cert["bse"][name], rel=1e-7), name
    # source: NIST certified residual SD and R^2 (from memory); rel 1e-9 (suggested for Longley)
    assert fit.sigma == pytest.approx(cert["residual_sd"], rel=1e-9)
    assert fit.r_squared == pytest.approx(cert["r_squared"], rel=1e-9)
    assert fit.rss == pytest.approx(cert["ssr"], rel=1e-9)
    # a condition number this large is why Longley is a test of the method (cond ~ 4.9e9 on
    # the raw columns; the column-scaled one we report is smaller but still large)
    assert fit.condition_number > 1e3


def _norris_file() -> Path:
    # source: NIST StRD 'Norris' (calibration of ozone monitors), the file scipy ships
    return Path(scipy.stats.__file__).parent / "tests" / "data" / "nist_linregress" / "Norris.dat"


def _norris() -> tuple[np.ndarray, np.ndarray, dict[str, float]]:
    lines = _norris_file().read_text().splitlines()
    cert: dict[str, float] = {}
    for line in lines[:60]:
        words = line.split()
        if words[:1] in (["B0"], ["B1"]):
            k = words[0][1]
            cert[f"b{k}"], cert[f"se{k}"] = float(words[1]), float(words[2])
    start = next(i for i, line in enumerate(lines) if line.split() == ["Data:", "y", "x"]) + 1
    rows = [tuple(map(float, line.split())) for line in lines[start:] if line.strip()]
    y, x = np.array(rows).T
    return x, y, cert


@pytest.mark.skipif(not _norris_file().exists(), reason="this scipy build ships no NIST data")
def test_norris_matches_nist_certified_values():
    x, y, cert = _norris()
    assert x.size == 36  # the file's stated number of observations
    # the certified values as NIST publishes them (read from the file, checked here so a
    # parsing slip cannot pass silently)
    assert cert["b0"] == -0.262323073774029 and cert["b1"] == 1.00211681802045
    fit = ols(np.column_stack([np.ones(x.size), x]), y, ["const", "x"], True)
    # source: NIST StRD Norris certified estimates, SDs, residual SD and R^2; rel 1e-9
    assert fit.coef[0] == pytest.approx(cert["b0"], rel=1e-9)
    assert fit.coef[1] == pytest.approx(cert["b1"], rel=1e-9)
    assert fit.se[0] == pytest.approx(cert["se0"], rel=1e-9)
    assert fit.se[1] == pytest.approx(cert["se1"], rel=1e-9)
    assert fit.sigma == pytest.approx(0.884796396144373, rel=1e-9)
    assert fit.r_squared == pytest.approx(0.999993745883712, rel=1e-12)
    # source: NIST certified residual sum of squares 26.6173985294224 on 34 df
    assert fit.rss == pytest.approx(26.6173985294224, rel=1e-9) and fit.df_resid == 34


# ----------------------------------------------------------- vs statsmodels
@pytest.mark.parametrize("intercept", [True, False])
def test_ols_matches_statsmodels(intercept):
    rng = np.random.default_rng(5)
    n = 73
    X = np.column_stack([rng.uniform(1, 9, n), rng.normal(0, 3, n), rng.exponential(2, n)])
    if intercept:
        X = np.column_stack([np.ones(n), X])
    z = X @ rng.normal(0, 1, X.shape[1]) + 2.0 + rng.normal(0, 0.5, n)
    names = [f"c{j}" for j in range(X.shape[1])]
    fit = ols(X, z, names, intercept)
    # source: statsmodels OLS (reference library); rel 1e-9, well-conditioned design
    ref = sm.OLS(z, X, hasconst=intercept).fit()
    np.testing.assert_allclose(fit.coef, ref.params, rtol=1e-9)
    np.testing.assert_allclose(fit.se, ref.bse, rtol=1e-9)
    np.testing.assert_allclose(fit.fitted, ref.fittedvalues, rtol=1e-9)
    np.testing.assert_allclose(fit.cov_unscaled, ref.normalized_cov_params, rtol=1e-8)
    assert fit.rss == pytest.approx(ref.ssr, rel=1e-9)
    assert fit.df_resid == ref.df_resid
    # without an intercept statsmodels reports the uncentred R^2, as we do
    assert fit.r_squared == pytest.approx(ref.rsquared, rel=1e-9)
    assert fit.adj_r_squared == pytest.approx(ref.rsquared_adj, rel=1e-9)
    assert fit.llf == pytest.approx(ref.llf, rel=1e-9)
    rows = fit.table(0.9)
    ci = ref.conf_int(0.10)
    for i, row in enumerate(rows):
        assert row.term == names[i]
        c = row.classical
        assert c.t_statistic == pytest.approx(ref.tvalues[i], rel=1e-9)
        assert c.p_value == pytest.approx(ref.pvalues[i], rel=1e-8, abs=1e-300)
        assert (c.ci_low, c.ci_high) == pytest.approx(tuple(ci[i]), rel=1e-9)
        assert row.under("classical") is c and row.robust == ()


def test_condition_number_is_that_of_the_column_scaled_design():
    rng = np.random.default_rng(2)
    X = np.column_stack([np.ones(40), 1e6 * rng.uniform(1, 2, 40), rng.normal(0, 1, 40)])
    fit = ols(X, rng.normal(0, 1, 40), ["a", "b", "c"], True)
    # source: numpy.linalg.cond (2-norm) of the design with unit-length columns
    assert fit.condition_number == pytest.approx(
        np.linalg.cond(X / np.linalg.norm(X, axis=0)), rel=1e-9
    )


def test_rank_deficient_design_names_the_dependent_column():
    rng = np.random.default_rng(0)
    x = rng.normal(0, 1, 30)
    X = np.column_stack([np.ones(30), x, 2 * x - 1])  # third = 2 * second - intercept
    # source: numpy.linalg.matrix_rank (SVD) agrees the design has rank 2, not 3
    assert np.linalg.matrix_rank(X) == 2
    with pytest.raises(CandidateFailure) as exc:
        ols(X, rng.normal(0, 1, 30), ["intercept", "x", "x2"], True)
    assert "rank-deficient" in exc.value.reason
    assert len(exc.value.details["dependent"]) == 1


def test_too_few_rows_and_zero_columns_are_candidate_failures():
    with pytest.raises(CandidateFailure, match="3 rows cannot estimate 3"):
        qr_solve(np.eye(3), np.ones(3))
    X = np.column_stack([np.ones(5), np.zeros(5)])
    with pytest.raises(CandidateFailure, match="'w' is all zeros"):
        qr_solve(X, np.arange(5.0), ["intercept", "w"])


def test_exact_fit_has_infinite_log_likelihood_and_no_p_values():
    X = np.column_stack([np.ones(6), np.arange(6.0)])
    fit = ols(X, 1.0 + 2.0 * np.arange(6.0), ["intercept", "x"], True)
    assert fit.coef == pytest.approx([1.0, 2.0])
    assert fit.rss == pytest.approx(0.0, abs=1e-24)
    if fit.rss == 0:
        assert fit.llf == math.inf
        assert fit.table()[1].classical.p_value is None  # no standard error, no test


# ------------------------------------------------------- robust covariances
def _engel():
    # source: statsmodels.datasets.engel (Koenker & Bassett 1982 household food expenditure)
    d = sm.datasets.engel.load_pandas().data
    return d.income.to_numpy(), d.foodexp.to_numpy()


def _macro():
    # source: statsmodels.datasets.macrodata (US quarterly macro series 1959-2009)
    d = sm.datasets.macrodata.load_pandas().data
    return d.realgdp.to_numpy(), d.realcons.to_numpy()


def _compare(fit, kind, cov, ref):
    rows = fit.table(robust=[RobustCovariance(kind, cov)])
    other = next(k for k in (StandardErrors.HC3, StandardErrors.HAC) if k != kind)
    ci = ref.conf_int(0.05)
    for i, row in enumerate(rows):
        r = row.under(kind)
        assert row.under(kind.value) is r and row.robust == ((kind, r),)
        assert r.std_error == pytest.approx(ref.bse[i], rel=1e-8)
        assert r.p_value == pytest.approx(ref.pvalues[i], rel=1e-8, abs=1e-300)
        assert r.ci_low == pytest.approx(ci[i, 0], rel=1e-8)
        assert r.ci_high == pytest.approx(ci[i, 1], rel=1e-8)
        # the classical inference is unchanged
        se = float(np.sqrt(fit.cov_unscaled[i, i])) * fit.sigma
        assert row.classical.std_error == pytest.approx(se)
        with pytest.raises(KeyError):
            row.under(other)


@pytest.mark.parametrize("log", [False, True])
def test_hc3_matches_statsmodels_on_engel(log):
    x, y = _engel()
    if log:
        x, y = np.log(x), np.log(y)
    X = sm.add_constant(x)
    fit = ols(X, y, ["intercept", "income"], True)
    # source: statsmodels OLS(...).fit(cov_type="HC3", use_t=True) (t with n - p df)
    ref = sm.OLS(y, X).fit(cov_type="HC3", use_t=True)
    _compare(fit, StandardErrors.HC3, hc3_cov(fit, X), ref)
    assert not np.allclose(fit.se, ref.bse, rtol=1e-3)  # the two really differ here


def test_hac_matches_statsmodels_on_macrodata_in_shuffled_rows():
    x, y = _macro()
    n = y.size
    lags = newey_west_lags(n)
    assert lags == math.floor(4 * (n / 100) ** (2 / 9)) == 4
    # the rows reach the service shuffled; the order permutation restores time order
    rng = np.random.default_rng(7)
    perm = rng.permutation(n)
    X = sm.add_constant(x)
    fit = ols(X[perm], y[perm], ["intercept", "realgdp"], True)
    order = np.argsort(perm)  # row positions of the shuffled data, in time order
    # source: statsmodels OLS(...).fit(cov_type="HAC", cov_kwds={"maxlags": 4}) in time order
    ref = sm.OLS(y, X).fit(cov_type="HAC", cov_kwds={"maxlags": lags}, use_t=True)
    _compare(fit, StandardErrors.HAC, hac_cov(fit, X[perm], order, lags), ref)


def test_hac_lag_rule_values():
    # floor(4 (n/100)^(2/9)), common practice (Newey & West 1994)
    assert [newey_west_lags(n) for n in (10, 50, 100, 203, 1000)] == [2, 3, 4, 4, 6]


# ------------------------------------------------------------ batched solver
def test_solve_batch_matches_numpy_solve_on_badly_scaled_stacks():
    rng = np.random.default_rng(8)
    K, n, p = 6, 50, 4
    scales = np.array([1.0, 1e6, 1e-6, 2000.0])
    Xs = rng.normal(0, 1, (K, n, p)) * scales
    G = np.einsum("kni,knj->kij", Xs, Xs)
    c = np.einsum("kni,kn->ki", Xs, rng.normal(0, 1, (K, n)))
    B, ok = solve_batch(G, c)
    assert ok.all()
    for k in range(K):
        # source: numpy.linalg.lstsq on the same rows (SVD), column-scaled; rel 1e-9
        Xk = Xs[k]
        z = np.linalg.solve(Xk.T @ Xk, c[k])  # same normal equations, LAPACK gesv
        np.testing.assert_allclose(B[k], z, rtol=1e-8)


def test_ill_conditioned_gram_is_flagged_for_refit():
    rng = np.random.default_rng(1)
    n = 80
    x = rng.normal(0, 1, n)
    X = np.column_stack([np.ones(n), x, x + 1e-7 * rng.normal(0, 1, n)])
    _, ok = solve_batch((X.T @ X)[None], (X.T @ rng.normal(0, 1, n))[None])
    # source: cond(X'X) ~ 1e15 > 1e7 (column-scaled), so Cholesky is not trusted
    assert not ok[0]


def test_non_finite_and_zero_column_grams_are_flagged_not_solved():
    G = np.stack([np.eye(2), np.array([[1.0, 0.0], [0.0, 0.0]]), np.full((2, 2), np.nan)])
    c = np.ones((3, 2))
    B, ok = solve_batch(G, c)
    assert ok.tolist() == [True, False, False]
    assert B[0] == pytest.approx([1.0, 1.0]) and np.isnan(B[1:]).all()
    # column scaling first: a diagonal Gram with entries 1 and 1e-20 is the identity once
    # scaled, so it is solved (exactly: b_j = c_j / G_jj), not flagged
    B2, ok2 = solve_batch(np.diag([1.0, 1e-20])[None], np.array([[2.0, 3e-20]]))
    assert ok2[0] and B2[0] == pytest.approx([2.0, 3.0], rel=1e-12)


def _stack_with_conditions(conds, p, rng):
    """Column-scaled SPD matrices (unit diagonal) with the given condition numbers: a random
    orthogonal basis, eigenvalues spread geometrically from 1 to 1/cond, then scaled to a
    unit diagonal (which moves the condition number a little; it is measured again)."""
    out = []
    for cond in conds:
        Q, _ = np.linalg.qr(rng.normal(size=(p, p)))
        ev = np.geomspace(1.0, 1.0 / cond, p)
        A = (Q * ev) @ Q.T
        d = np.sqrt(np.diag(A))
        out.append(A / np.outer(d, d))
    return np.stack(out)


@pytest.mark.parametrize("p", [2, 4, 7])
def test_condition_check_decides_as_the_eigenvalues_do(p):
    from service.core import fitting

    rng = np.random.default_rng(p)
    conds = np.geomspace(1.0, 1e12, 400)  # through the 1e7 limit and the band around it
    Gs = _stack_with_conditions(conds, p, rng)
    got = fitting._checked_factors(Gs, fitting.COND_LIMIT)
    assert got is not None
    good, L, inv = got
    ev = np.linalg.eigvalsh(Gs)
    # source: numpy.linalg.eigvalsh, the condition check as written before (lambda_min >
    # lambda_max / 1e7), matrix by matrix
    assert good.tolist() == (ev[:, 0] > ev[:, -1] / fitting.COND_LIMIT).tolist()
    # source: numpy.linalg.cholesky of each matrix alone
    np.testing.assert_array_equal(L[7], np.linalg.cholesky(Gs[7]))
    for k in np.flatnonzero(good)[::40]:
        # source: scipy.linalg.solve_triangular (LAPACK trtrs) of L against the identity: the
        # inverse factor, lower triangular with exact zeros above the diagonal
        want = scipy.linalg.solve_triangular(L[k], np.eye(p), lower=True)
        assert np.all(np.triu(inv[k], 1) == 0.0)
        scale = np.linalg.norm(want) * np.linalg.cond(L[k]) * 1e-14
        assert np.max(np.abs(inv[k] - want)) <= scale


def test_a_matrix_is_solved_alike_in_any_stack():
    rng = np.random.default_rng(11)
    K, n, p = 40, 30, 6
    X = rng.normal(0, 1, (K, n, p)) * np.array([1.0, 1e4, 1e-3, 1.0, 50.0, 1.0])
    G = np.einsum("kni,knj->kij", X, X)
    c = np.einsum("kni,kn->ki", X, rng.normal(0, 1, (K, n)))
    B, ok, B1 = solve_batch_nested(G, c, 4)
    for k in (0, 17, 39):
        one, ok1, one1 = solve_batch_nested(G[k : k + 1], c[k : k + 1], 4)
        # source: the definition (each matrix factored, inverted and solved alone)
        assert ok1[0] == ok[k]
        np.testing.assert_array_equal(one[0], B[k])
        np.testing.assert_array_equal(one1[0], B1[k])


def _normal_stack(kind: str, K: int, seed: int, n: int = 40) -> tuple[np.ndarray, np.ndarray]:
    """K normal equations (G, c) of random 6-column designs: random, with two nearly
    collinear columns, or with columns scaled from 1e-6 to 1e6."""
    rng = np.random.default_rng(seed)
    X = rng.normal(0, 1, (K, n, 6))
    if kind == "collinear":
        X[:, :, 2] = X[:, :, 1] + 1e-2 * rng.normal(0, 1, (K, n))
    elif kind == "badly_scaled":
        X *= np.array([1.0, 1e6, 1e-6, 2000.0, 1.0, 1e3])
    return np.einsum("kni,knj->kij", X, X), np.einsum("kni,kn->ki", X, rng.normal(0, 1, (K, n)))


@pytest.mark.parametrize("kind", ["random", "collinear", "badly_scaled"])
def test_stacked_substitution_matches_lapack_solves(kind):
    K, lead = 300, 4
    G, c = _normal_stack(kind, K, len(kind))
    B, ok, B1 = solve_batch_nested(G, c, lead)
    assert ok.all()
    for k in range(0, K, 37):
        d = np.sqrt(np.diag(G[k]))
        cond = np.linalg.cond(G[k] / np.outer(d, d))
        # source: numpy.linalg.solve (LAPACK gesv) of the same systems; the two agree in
        # norm (column-scaled coordinates) to the condition number times a few roundings
        want = np.linalg.solve(G[k], c[k])
        assert np.linalg.norm((B[k] - want) * d) <= cond * 1e-14 * np.linalg.norm(want * d)
        want1 = np.linalg.solve(G[k][:lead, :lead], c[k][:lead])
        d1 = d[:lead]
        assert np.linalg.norm((B1[k] - want1) * d1) <= cond * 1e-14 * np.linalg.norm(want1 * d1)


@pytest.mark.parametrize("kind", ["random", "collinear", "badly_scaled"])
def test_inverse_diagonal_matches_numpy_inverse(kind):
    K, lead = 50, 4
    G, c = _normal_stack(kind, K, len(kind) + 3)
    B, ok, B1, diag = solve_batch_with_inverse_diagonal(G, c, lead)
    B0, ok0, B10 = solve_batch_nested(G, c, lead)
    assert ok.all() and ok.tolist() == ok0.tolist()
    # source: solve_batch_nested, the same solutions bit for bit
    np.testing.assert_array_equal(B, B0)
    np.testing.assert_array_equal(B1, B10)
    for k in range(K):
        d = np.sqrt(np.diag(G[k]))
        # source: numpy.linalg.inv (LAPACK gesv) of the column-scaled matrix, scaled back;
        # rel 1e-9 (condition numbers here below 1e5)
        want = np.diag(np.linalg.inv(G[k] / np.outer(d, d))) / d**2
        np.testing.assert_allclose(diag[k], want, rtol=1e-9)
