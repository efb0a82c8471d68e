"""Per-fold predictor powers of large tables from series cross-products
(``boxtidwell.estimate_fold_powers_by_series``) against the exact path (``estimate_powers``
on each training fold's rows), against scipy's nonlinear least squares, and the series
columns against the closed form.

Tolerances (fixed in advance): powers within 1e-6 of the exact path (the iteration's own
step tolerance, TOL); against scipy.optimize.least_squares within 1e-6; series columns
within 1e-13 of the closed form, relative to the largest value of the column; cross-validated
errors of a scored candidate within rel 1e-9 of the fold-by-fold path.
"""

from __future__ import annotations

import math
import zlib

import numpy as np
import pytest
from scipy.optimize import least_squares
from service.core import boxtidwell as bt
from service.core import fastcv
from service.core import transforms as tr
from service.core.bank import ColumnBank, FoldIndex
from service.core.cvresult import Dynamic
from service.core.folds import make_plan

TRUE_POWERS = (0.5, -0.4, 0.0)  # the Box-Cox form; without an intercept the last is 1.3


def _problem(kind: str, k: int, intercept: bool, n: int = 3000):
    """(z, Xf, x) with k powered predictors, in one of three designs."""
    rng = np.random.default_rng(zlib.crc32(f"{kind}{k}{intercept}".encode()))
    x = rng.uniform(1.0, 20.0, (n, k))
    w = rng.normal(0.0, 1.0, n)
    if kind == "collinear":  # the powered predictors nearly proportional, w tied to log x1
        for j in range(1, k):
            x[:, j] = x[:, 0] * np.exp(0.05 * rng.normal(0.0, 1.0, n))
        w = np.log(x[:, 0]) + 0.05 * rng.normal(0.0, 1.0, n)
    scale = 1.0
    if kind == "badly_scaled":  # x near 1e4 (|log x| ~ 10), w on 1e6, response near 1e3
        x = 1e4 * (1.0 + 4.0 * rng.uniform(0.0, 1.0, (n, k)))
        w = 1e6 * w
        scale = 1e-6
    cols = []
    for j in range(k):
        a = TRUE_POWERS[j] if intercept or j < 2 else 1.3
        xa = x[:, j] ** a if not intercept else tr.Transform("box_cox", lam=a).forward(x[:, j])
        cols.append(xa / np.std(xa))
    signal = np.sum(cols, axis=0) + 0.3 * scale * w
    z = (1e3 if kind == "badly_scaled" else 2.0) * intercept + signal + rng.normal(0, 0.2, n)
    Xf = np.column_stack([np.ones(n), w]) if intercept else w[:, None]
    return z, Xf, x


def _folds(n: int, seed: int = 0):
    plan = make_plan(n, 5, 1, seed)
    return [np.flatnonzero(plan.assignments[0] != f) for f in range(5)]


def _exact(z, Xf, x, train, start, intercept):
    return [
        bt.estimate_powers(z[r], Xf[r], x[r], start=start, boxcox_form=intercept, with_se=False)
        for r in train
    ]


def _count_exact(monkeypatch):
    calls = []
    real = bt.estimate_powers

    def spy(*args, **kw):
        calls.append(1)
        return real(*args, **kw)

    monkeypatch.setattr(bt, "estimate_powers", spy)
    return calls


@pytest.mark.parametrize("k", [1, 2, 3])
@pytest.mark.parametrize("intercept", [True, False], ids=["box_cox_form", "plain"])
@pytest.mark.parametrize("kind", ["random", "collinear", "badly_scaled"])
def test_fold_powers_equal_the_exact_path(kind, intercept, k, monkeypatch):
    z, Xf, x = _problem(kind, k, intercept)
    train = _folds(z.size)
    truth = [TRUE_POWERS[j] if intercept or j < 2 else 1.3 for j in range(k)]
    a0 = bt.estimate_powers(z, Xf, x, start=truth, boxcox_form=intercept).powers
    start = a0 + 0.05  # away from every fold's optimum: several steps
    exact = _exact(z, Xf, x, train, start, intercept)
    calls = _count_exact(monkeypatch)
    fast = bt.estimate_fold_powers_by_series(z, Xf, x, train, start, boxcox_form=intercept)
    assert len(calls) == 0  # every fold was settled by the series path
    for e, f in zip(exact, fast, strict=True):
        assert e.iterations >= 2 and f.method == "box_tidwell"
        # source: the exact path (estimate_powers on the fold's rows), abs TOL = 1e-6
        np.testing.assert_allclose(f.powers, e.powers, rtol=0, atol=1e-6)
        # the same steps: the same number of them
        assert f.iterations == e.iterations


@pytest.mark.parametrize("intercept", [True, False], ids=["box_cox_form", "plain"])
def test_a_radius_too_small_for_the_steps_sends_the_folds_to_the_exact_path(intercept, monkeypatch):
    z, Xf, x = _problem("random", 2, intercept)
    train = _folds(z.size)
    start = bt.estimate_powers(z, Xf, x, boxcox_form=intercept).powers + 0.05
    exact = _exact(z, Xf, x, train, start, intercept)
    calls = _count_exact(monkeypatch)
    fast = bt.estimate_fold_powers_by_series(
        z, Xf, x, train, start, boxcox_form=intercept, radius=np.full(2, 1e-4)
    )
    assert len(calls) == len(train)  # the first step already leaves the radius
    for e, f in zip(exact, fast, strict=True):
        np.testing.assert_array_equal(f.powers, e.powers)  # the exact path itself


def test_a_fold_far_from_the_others_leaves_the_series_path_alone(monkeypatch):
    """Fold 1's held-out rows follow another power: the other folds' optimum lies outside
    the radius set by fold 1's training rows ... only the folds that need it go exact."""
    z, Xf, x = _problem("random", 1, True)
    train = _folds(z.size)
    start = bt.estimate_powers(z, Xf, x).powers
    exact = _exact(z, Xf, x, train, start, True)
    calls = _count_exact(monkeypatch)
    radius = np.array([abs(float(e.powers[0] - start[0])) for e in exact])
    # a radius between the smallest and the largest move: some folds in, some out
    r = float(np.median(radius))
    fast = bt.estimate_fold_powers_by_series(z, Xf, x, train, start, radius=np.array([r]))
    outside = int(np.sum(radius > r))
    assert 1 <= len(calls) <= len(train) - 1 and len(calls) >= outside
    for e, f in zip(exact, fast, strict=True):
        # source: the exact path on each fold's rows, abs TOL = 1e-6
        np.testing.assert_allclose(f.powers, e.powers, rtol=0, atol=1e-6)


def test_one_fold_against_scipy_least_squares():
    z, Xf, x = _problem("random", 2, True)
    train = _folds(z.size)
    start = bt.estimate_powers(z, Xf, x).powers + 0.05
    fast = bt.estimate_fold_powers_by_series(z, Xf, x, train, start)
    rows = train[0]
    zr, Xr, xr = z[rows], Xf[rows], x[rows]

    def resid(theta):
        a, coef = theta[:2], theta[2:]
        W = np.column_stack(
            [(xr[:, j] ** a[j] - 1.0) / a[j] for j in range(2)]  # no power is near 0 here
        )
        return zr - np.column_stack([Xr, W]) @ coef

    A0 = np.column_stack([Xr, bt.power_columns(np.log(xr), start, True)[0]])
    coef0 = np.linalg.lstsq(A0, zr, rcond=None)[0]
    ref = least_squares(
        resid, np.concatenate([start, coef0]), xtol=1e-15, ftol=1e-15, gtol=1e-15, method="lm"
    )
    # source: scipy.optimize.least_squares (Levenberg-Marquardt, MINPACK) on fold 1's rows
    np.testing.assert_allclose(fast[0].powers, ref.x[:2], rtol=0, atol=1e-6)


@pytest.mark.parametrize("r", [1e-3, 0.05, 0.3, 1.0])
def test_series_order_is_the_shortest_within_the_bound(r):
    m = bt.series_order(r)
    assert m is not None

    def bound(order):
        return r ** (order + 1) / math.factorial(order + 1) * math.exp(2 * r)

    # source: the Lagrange remainder bound r^(M+1)/(M+1)! e^(2r), written out
    assert bound(m) <= 2.0**-53
    assert m == 0 or bound(m - 1) > 2.0**-53


@pytest.mark.parametrize("r", [5.0, 1e6, math.inf, math.nan])
def test_a_reach_beyond_the_longest_series_is_refused(r):
    assert bt.series_order(r) is None


def test_a_huge_radius_sends_every_fold_to_the_exact_path(monkeypatch):
    z, Xf, x = _problem("random", 1, True)
    train = _folds(z.size)
    start = bt.estimate_powers(z, Xf, x).powers
    exact = _exact(z, Xf, x, train, start, True)
    calls = _count_exact(monkeypatch)
    fast = bt.estimate_fold_powers_by_series(z, Xf, x, train, start, radius=np.array([1e300]))
    assert len(calls) == len(train)
    for e, f in zip(exact, fast, strict=True):
        np.testing.assert_array_equal(f.powers, e.powers)  # the exact path itself


@pytest.mark.parametrize(
    ("a0", "bc"), [(0.7, True), (-1.3, True), (0.004, True), (0.0, True), (0.7, False)]
)
def test_series_columns_equal_the_closed_form_inside_the_radius(a0, bc):
    rng = np.random.default_rng(5)
    L = np.log(rng.uniform(0.05, 30.0, 4000))[:, None]
    rho = 0.05
    rows = bt._Held([], np.zeros(L.shape[0]), np.ones((L.shape[0], 1)), L)
    ser = bt._Series(rows, np.array([a0]), np.zeros(2), bc, np.array([rho]))
    assert ser.ok
    B = bt._series_basis(L, ser.c, ser.h, ser.origin, ser.m1, bc)
    for d in (-rho, -0.3 * rho, 0.0, 0.7 * rho, rho):
        a = a0 + d
        delta = (a - ser.c[0]) / ser.h[0]
        W = delta ** np.arange(ser.m1) @ B
        D = (np.arange(1, ser.m1) * delta ** np.arange(ser.m1 - 1)) @ B[1:] / ser.h[0]
        x = np.exp(L[:, 0])
        # source: closed form, (x^a - 1)/a and (x^a log x - w)/a, or x^a and x^a log x
        if bc:
            w = np.log(x) if a == 0 else np.expm1(a * L[:, 0]) / a
            dw = 0.5 * L[:, 0] ** 2 if a == 0 else (x**a * L[:, 0] - w) / a
        else:
            w, dw = x**a, x**a * L[:, 0]
        np.testing.assert_allclose(W, w, rtol=0, atol=1e-13 * np.max(np.abs(w)))
        if not (bc and abs(a) < 1e-3):  # the closed-form derivative cancels near 0
            np.testing.assert_allclose(D, dw, rtol=0, atol=1e-13 * np.max(np.abs(dw)))


def test_overlapping_held_out_rows_take_the_exact_path(monkeypatch):
    z, Xf, x = _problem("random", 1, True, n=600)
    plan = make_plan(z.size, 3, 2, 0)
    train = [np.flatnonzero(a != f) for a in plan.assignments for f in range(3)]
    start = bt.estimate_powers(z, Xf, x).powers
    calls = _count_exact(monkeypatch)
    fits = bt.estimate_fold_powers_by_series(z, Xf, x, train, start)
    assert len(calls) == len(train) and len(fits) == len(train)


def test_scoring_a_large_table_gives_the_fold_by_fold_numbers(monkeypatch):
    """A table above fastcv.POWER_BATCH_CELLS scored with the series path and with one
    exact estimate per fold."""
    rng = np.random.default_rng(11)
    n = 12_000
    x = rng.uniform(1, 9, n)
    X = np.column_stack([np.ones(n), rng.normal(0, 1, n)])
    y = np.exp(1.0 + 0.4 * np.sqrt(x) + 0.1 * X[:, 1] + rng.normal(0, 0.1, n))
    z = np.log(y)
    plan = make_plan(n, 5, 2, 3)
    assert n * plan.folds > fastcv.POWER_BATCH_CELLS
    bank = ColumnBank.of_matrix(X, FoldIndex.of(plan, n))
    start = bt.estimate_powers(z, X, x).powers
    dyn = Dynamic([2], x[:, None], start)
    t = tr.Transform("log", shift=0.0)
    calls = _count_exact(monkeypatch)
    fast = fastcv.Scorer(bank, y, plan, False).score(t, [0, 1], None, dyn)
    assert len(calls) == 0

    def fold_by_fold(z, Xf, x, train, start, boxcox_form=True, labels=None):
        return _exact(z, Xf, x, train, start, boxcox_form)

    monkeypatch.setattr(fastcv, "estimate_fold_powers_by_series", fold_by_fold)
    slow = fastcv.Scorer(bank, y, plan, False).score(t, [0, 1], None, dyn)
    assert len(calls) == plan.n_splits
    # source: the fold-by-fold exact path; powers abs 1e-6, errors rel 1e-9
    np.testing.assert_allclose(fast.fold_powers, slow.fold_powers, rtol=0, atol=1e-6)
    np.testing.assert_allclose(fast.fold_values, slow.fold_values, rtol=1e-9)
    assert fast.value == pytest.approx(slow.value, rel=1e-9)


def test_random_problems_give_the_exact_paths_powers():
    """20 random problems: sizes, fold counts, forms, 1-3 powers, predictor ranges from
    1e-3 to 1e5, noise from 1e-3 to 1 of the signal, starts on or near the estimate."""
    real = bt.estimate_powers
    for trial in range(20):
        rng = np.random.default_rng(1000 + trial)
        n = int(rng.integers(2000, 5000))
        k = int(rng.integers(1, 4))
        bc = bool(rng.integers(0, 2))
        lo = 10 ** rng.uniform(-3, 2)
        x = rng.uniform(lo, lo * 10 ** rng.uniform(0.3, 3), (n, k))
        w = rng.normal(size=n) * 10 ** rng.uniform(-3, 3)
        a_true = rng.uniform(-2, 2, k)
        cols = [x[:, j] ** a_true[j] for j in range(k)]
        z = sum(c / np.std(c) for c in cols) + 0.3 * w / np.std(w)
        z = z + rng.normal(0, 10 ** rng.uniform(-3, 0), n) + 5.0 * bc
        Xf = np.column_stack([np.ones(n), w]) if bc else w[:, None]
        plan = make_plan(n, int(rng.integers(3, 11)), 1, trial)
        train = [np.flatnonzero(plan.assignments[0] != f) for f in range(plan.folds)]
        a0 = real(z, Xf, x, start=a_true, boxcox_form=bc).powers
        start = a0 + rng.normal(0, 0.02, k) * rng.integers(0, 2)
        exact = _exact(z, Xf, x, train, start, bc)
        fast = bt.estimate_fold_powers_by_series(z, Xf, x, train, start, boxcox_form=bc)
        for e, f in zip(exact, fast, strict=True):
            # source: the exact path on each fold's rows, abs TOL = 1e-6
            np.testing.assert_allclose(f.powers, e.powers, rtol=0, atol=1e-6, err_msg=str(trial))
