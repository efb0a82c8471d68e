"""Residual sums of squares of the profile likelihood against numpy least squares."""

from __future__ import annotations

import numpy as np
import pytest
from service.core.likelihood import _Projector


@pytest.mark.parametrize("noise", [1.0, 1e-3, 1e-9, 0.0])
def test_projector_rss_matches_least_squares(noise):
    rng = np.random.default_rng(4)
    n = 500
    X = np.column_stack([np.ones(n), rng.uniform(1, 1e4, n), rng.normal(0, 1e-3, n)])
    z = X @ np.array([3.0, 2e-3, 50.0]) + noise * rng.normal(size=n)
    coef, *_ = np.linalg.lstsq(X, z, rcond=None)
    r = z - X @ coef
    ref = float(r @ r)
    got = _Projector(X, n).rss(z)
    # source: numpy.linalg.lstsq (SVD least squares) as the reference
    assert got == pytest.approx(ref, rel=1e-8, abs=1e-20 * float(z @ z))


def test_projector_handles_a_rank_deficient_design():
    rng = np.random.default_rng(5)
    n = 200
    x = rng.normal(size=n)
    X = np.column_stack([np.ones(n), x, 2 * x])  # third column repeats the second
    z = 1 + x + rng.normal(size=n)
    p = _Projector(X, n)
    assert p.L is None and p.has_const
    coef, *_ = np.linalg.lstsq(X, z, rcond=None)
    r = z - X @ coef
    assert p.rss(z) == pytest.approx(float(r @ r), rel=1e-10)


def test_constant_detected_through_either_path():
    rng = np.random.default_rng(6)
    n = 100
    x = rng.normal(size=n)
    assert _Projector(np.column_stack([np.ones(n), x]), n).has_const
    assert not _Projector(x[:, None], n).has_const


# ------------------------------------------------------------ every training fold at once
import math  # noqa: E402

from scipy import optimize  # noqa: E402
from service.core import likelihood as lk  # noqa: E402
from service.core.folds import make_plan  # noqa: E402


@pytest.mark.parametrize(
    ("f", "lo", "hi"),
    [
        (lambda t: -((t - 0.3) ** 2), -1.0, 1.0),
        (lambda t: math.sin(3 * t) + 0.1 * t, -2.0, 1.0),
        (lambda t: -(abs(t - 1.1) ** 1.5), 0.0, 3.0),
        (lambda t: -math.cosh(t - 2.9), 1.0, 3.0),
        (lambda t: -abs(t), 0.5, 0.5),
    ],
)
def test_stacked_brent_takes_scipys_bounded_steps(f, lo, hi):
    # three copies of one problem beside two others, so the stacked steps run out of step
    fs = [f, lambda t: -((t + 0.7) ** 2), f, lambda t: math.cos(t), f]
    los = np.array([lo, -2.0, lo, -1.0, lo])
    his = np.array([hi, 2.0, hi, 2.0, hi])
    x, fx = lk._brent_max(
        lambda j, v: np.array([fs[int(a)](float(b)) for a, b in zip(j, v, strict=True)]),
        los,
        his,
        xatol=1e-9,
    )
    for k in range(5):
        ref = optimize.minimize_scalar(
            lambda t, k=k: -fs[k](t),
            bounds=(los[k], his[k]),
            method="bounded",
            options={"xatol": 1e-9},
        )
        # source: scipy.optimize.minimize_scalar(method="bounded"): the same points, exactly
        assert x[k] == ref.x and fx[k] == -ref.fun


def _sm_box_cox_llf(y, X, lam):
    """Profile log-likelihood with the Jacobian from statsmodels OLS of scipy's boxcox(y)."""
    import statsmodels.api as sm
    from scipy import stats

    res = sm.OLS(stats.boxcox(y, lmbda=lam), X).fit(method="qr")
    return float(res.llf + (lam - 1.0) * np.sum(np.log(y)))


@pytest.mark.parametrize("near", [None, 0.45, 2.0])
def test_fold_lambdas_equal_the_profile_maximum_on_each_training_fold(near):
    rng = np.random.default_rng(9)
    n = 240
    X = np.column_stack([np.ones(n), rng.uniform(1, 10, n), rng.normal(size=n)])
    y = (1 + 0.3 * X[:, 1] + 0.1 * X[:, 2] + rng.normal(0, 0.1, n)) ** 2
    a = make_plan(n, 5, 1, 4).assignments[0]
    train = [np.flatnonzero(a != k) for k in range(5)]
    test = [np.flatnonzero(a == k) for k in range(5)]
    # X'X of every fold as the column bank gives it: all rows minus the held-out rows
    grams = np.stack([X.T @ X - X[t].T @ X[t] for t in test])
    got = lk.fold_lambdas("box_cox", y, X, train, grams, near)
    for k, rows in enumerate(train):
        one = lk.estimate_lambda("box_cox", y[rows], X[rows], with_interval=False, near=near)
        # source: the one-fold path (same grids and Brent steps; the profile's values differ
        # in rounding only, which moves the argmax of a flat maximum by ~1e-7)
        assert got[k] == pytest.approx(one.lam, abs=1e-6)
        ref = optimize.minimize_scalar(
            lambda t, rows=rows: -_sm_box_cox_llf(y[rows], X[rows], t),
            bounds=(0.0, 1.0),
            method="bounded",
            options={"xatol": 1e-10},
        )
        # source: statsmodels OLS llf of scipy.stats.boxcox(y, lambda) plus the Jacobian,
        # maximised by scipy.optimize.minimize_scalar; abs 1e-4 (the suggested tolerance
        # for a regression Box-Cox lambda in the public checks)
        assert got[k] == pytest.approx(ref.x, abs=1e-4)


def test_fold_lambdas_leave_an_ill_conditioned_fold_to_the_one_fold_path():
    import statsmodels.api as sm
    from service.core import transforms as tr
    from service.core.bank import ColumnBank, FoldIndex
    from service.core.fastcv import Scorer

    d = sm.datasets.longley.load_pandas().data
    y = d["TOTEMP"].to_numpy(float)
    X = np.column_stack(
        [np.ones(16), d[["GNPDEFL", "GNP", "UNEMP", "ARMED", "POP", "YEAR"]].to_numpy(float)]
    )
    plan = make_plan(16, 5, 1, 0)
    index = FoldIndex.of(plan, 16)
    bank = ColumnBank.of_matrix(X, index)
    S = np.arange(7)
    grams = bank.train_grams(S, 0)
    # the scaled X'X of every Longley fold is far above the 1e8 limit: no fold is taken here
    assert lk.fold_lambdas("box_cox", y, X, index.train[0], grams, 1.47) == [None] * 5
    res = Scorer(bank, y, plan, False).score(tr.Transform("box_cox"), list(S))
    near = lk.fit_transform(tr.Transform("box_cox"), y, X).lam  # the scorer's warm start
    for k, rows in enumerate(index.train[0]):
        one = lk.estimate_lambda("box_cox", y[rows], X[rows], with_interval=False, near=near)
        # the one-fold path itself (QR residuals): the same lambda
        assert res.fold_lambdas[k] == pytest.approx(one.lam, abs=1e-12)
    # source: CHECKS_PUBLIC longley (statsmodels.datasets.longley): per-fold lambda with
    # KFold(5, shuffle=True, random_state=0) = [2.7777, 2.0515, -0.73075, 1.2683, -0.34607]
    np.testing.assert_allclose(
        res.fold_lambdas, [2.7777, 2.0515, -0.73075, 1.2683, -0.34607], atol=2e-3
    )


@pytest.mark.parametrize("kind", ["random", "collinear", "badly_scaled"])
def test_many_candidates_lambdas_equal_one_call_per_candidate(kind):
    rng = np.random.default_rng(len(kind) + 1)
    n = 200
    w = rng.uniform(1, 10, n)
    y = (1 + 0.3 * w + rng.normal(0, 0.15, n)) ** 2
    plan = make_plan(n, 5, 2, 1)
    train = [np.flatnonzero(a != k) for a in plan.assignments for k in range(5)]
    problems = []
    for c in range(5):
        cols = [np.ones(n), w, rng.normal(size=n)]
        if kind == "collinear":  # a fold's scaled X'X fails the check: the one-fold path
            cols.append(cols[2] + 1e-7 * rng.normal(size=n))
        elif kind == "badly_scaled":
            cols.append(1e6 * rng.uniform(0, 1, n) + 1990.0)
        else:
            cols.append(rng.uniform(0, 1, n))
        X = np.column_stack(cols[: 3 + (c % 2)])  # two design widths
        grams = np.stack([X[rows].T @ X[rows] for rows in train])
        near = None if c == 0 else lk.estimate_lambda("box_cox", y, X, with_interval=False).lam
        problems.append(lk.FoldLambdaProblem(X, train, grams, near))
    got = lk.many_fold_lambdas("box_cox", y, problems)
    for pr, lams in zip(problems, got, strict=True):
        # source: the one-candidate path (fold_lambdas per candidate), the same steps
        assert lams == lk.fold_lambdas("box_cox", y, pr.X, pr.train, pr.grams, pr.near)
    pr = problems[1]
    rows = train[2]
    if got[1][2] is not None:
        ref = optimize.minimize_scalar(
            lambda t: -_sm_box_cox_llf(y[rows], pr.X[rows], t),
            bounds=(-1.0, 2.0),
            method="bounded",
            options={"xatol": 1e-10},
        )
        # source: statsmodels OLS llf of scipy.stats.boxcox(y, lambda) plus the Jacobian,
        # maximised by scipy.optimize.minimize_scalar; abs 1e-4 (the suggested tolerance
        # for a regression Box-Cox lambda in the public checks)
        assert got[1][2] == pytest.approx(ref.x, abs=1e-4)
    if kind == "collinear":
        assert any(v is None for v in got[1])  # left to the one-fold path, as alone


def test_many_candidates_lambdas_of_a_constant_design_are_scipys_boxcox_mle():
    from scipy import stats

    rng = np.random.default_rng(5)
    n = 150
    y = rng.lognormal(1.0, 0.4, n) + 0.5
    X = np.ones((n, 1))
    plan = make_plan(n, 3, 1, 2)
    train = [np.flatnonzero(plan.assignments[0] != k) for k in range(3)]
    grams = np.stack([X[rows].T @ X[rows] for rows in train])
    got = lk.many_fold_lambdas("box_cox", y, [lk.FoldLambdaProblem(X, train, grams, None)] * 2)
    for lams in got:
        for rows, lam in zip(train, lams, strict=True):
            # source: scipy.stats.boxcox_normmax(method="mle") on the fold's rows (a design
            # of a constant alone is scipy's model); abs 1e-5 (its optimiser's tolerance)
            ref = stats.boxcox_normmax(y[rows], method="mle")
            assert lam == pytest.approx(ref, abs=1e-5)


# ------------------------------------------------------------ all rows, many designs at once
def _designs(kind, rng, n, w):
    out = []
    for c in range(6):
        cols = [np.ones(n), w, rng.normal(size=n)]
        if kind == "collinear":  # X'X fails the condition check: the one-design path
            cols.append(cols[2] + 1e-7 * rng.normal(size=n))
        elif kind == "badly_scaled":
            cols.append(1e6 * rng.uniform(0, 1, n) + 1990.0)
        else:
            cols.append(rng.uniform(0, 1, n))
        out.append(np.column_stack(cols[: 3 + (c % 2)]))  # two design widths
    return out


@pytest.mark.parametrize(
    ("kind", "family"),
    [
        ("random", "box_cox"),
        ("collinear", "box_cox"),
        ("badly_scaled", "box_cox"),
        ("random", "yeo_johnson"),
    ],
)
def test_many_lambdas_equal_scipys_bounded_search_on_each_design(kind, family):
    rng = np.random.default_rng(len(kind) + len(family))
    n = 300
    w = rng.uniform(1, 10, n)
    y = (1 + 0.3 * w + rng.normal(0, 0.15, n)) ** 2
    designs = _designs(kind, rng, n, w)
    got = lk.many_lambdas(family, y, designs)
    for X, lam in zip(designs, got, strict=True):
        if lam is None:
            continue
        one = lk.estimate_lambda(family, y, X, with_interval=False)
        # source: the one-design path (grid, then scipy.optimize.minimize_scalar bounded,
        # xatol 1e-9); the profile's values differ in rounding only, which moves the argmax
        # of a flat maximum by ~1e-7 at most
        assert lam == pytest.approx(one.lam, abs=1e-6)
    if family == "box_cox":
        X = designs[2]
        ref = optimize.minimize_scalar(
            lambda t: -_sm_box_cox_llf(y, X, t),
            bounds=(-1.0, 2.0),
            method="bounded",
            options={"xatol": 1e-10},
        )
        # source: statsmodels OLS llf of scipy.stats.boxcox(y, lambda) plus the Jacobian,
        # maximised by scipy.optimize.minimize_scalar; abs 1e-4 (the suggested tolerance
        # for a regression Box-Cox lambda in the public checks)
        assert got[2] == pytest.approx(ref.x, abs=1e-4)
    if kind == "collinear":
        assert got[1] is None and got[3] is None  # left to the one-design path
        assert got[0] is not None


def test_many_lambdas_of_a_constant_design_are_scipys_boxcox_mle():
    from scipy import stats

    rng = np.random.default_rng(8)
    y = rng.lognormal(1.0, 0.4, 180) + 0.5
    got = lk.many_lambdas("box_cox", y, [np.ones((180, 1))] * 3)
    # source: scipy.stats.boxcox_normmax(method="mle") (a design of a constant alone is
    # scipy's model); abs 1e-5 (its optimiser's tolerance)
    ref = stats.boxcox_normmax(y, method="mle")
    assert got == [pytest.approx(ref, abs=1e-5)] * 3
