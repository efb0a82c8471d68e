"""The fast core against exact refits: per-fold solutions from downdated Gram matrices, fold
errors, the exact-refit fallback on ill-conditioned designs, and the smearing shortcuts within
their stated bound.

Tolerances (fixed in advance): solutions and fold errors rel 1e-8 against numpy.linalg.lstsq
refits with smearing written out (Duan 1983); smearing shortcuts within TREE_RTOL plus 1e-12
of a 40-digit mpmath sum.
"""

from __future__ import annotations

import math
import zlib

import mpmath
import numpy as np
import pytest
from service.core import _smear_tree as st
from service.core import transforms as tr
from service.core.bank import ColumnBank, FoldIndex
from service.core.fastcv import Scorer, solve_batch
from service.core.folds import make_plan


def _designs(kind: str, rng, n: int) -> np.ndarray:
    x1 = rng.uniform(1, 5, n)
    x2 = rng.normal(0, 1, n)
    if kind == "random":
        return np.column_stack([np.ones(n), x1, x2, rng.uniform(0, 1, n)])
    if kind == "collinear":  # cond of the scaled Gram matrix ~ 1e10: exact-refit fallback
        return np.column_stack([np.ones(n), x1, x1 + 1e-5 * rng.normal(0, 1, n), x2])
    # badly scaled: columns on 1e-6 .. 1e6 and a calendar year beside the intercept
    return np.column_stack(
        [np.ones(n), 1e6 * x1, 1e-6 * rng.uniform(1, 2, n), 1990.0 + rng.uniform(0, 30, n)]
    )


def _lstsq_cv(X, y, forward, inverse, plan):
    """Per-fold lstsq solutions and smeared RMSE, written out."""
    sols, errs = [], []
    for a in plan.assignments:
        for k in range(plan.folds):
            te, trn = a == k, a != k
            z = forward(y[trn])
            scale = np.sqrt(np.sum(X[trn] ** 2, axis=0))
            # source: numpy.linalg.lstsq (SVD) on the column-scaled training rows
            b = np.linalg.lstsq(X[trn] / scale, z, rcond=None)[0] / scale
            e = z - X[trn] @ b
            eta = X[te] @ b
            # source: Duan (1983) smearing estimate, mean over training residuals
            mean = inverse(eta[:, None] + e[None, :]).mean(axis=1)
            sols.append(b)
            errs.append(math.sqrt(float(np.mean((y[te] - mean) ** 2))))
    return np.array(sols), np.array(errs)


FAMILIES = {
    "identity": (tr.Transform("identity"), lambda v: v, lambda v: v),
    "log": (tr.Transform("log", shift=0.0), np.log, np.exp),
    "sqrt": (tr.Transform("sqrt"), np.sqrt, lambda v: np.maximum(v, 0) ** 2),
    "square": (tr.Transform("square"), np.square, lambda v: np.sqrt(np.maximum(v, 0))),
}


@pytest.mark.parametrize("kind", ["random", "collinear", "badly_scaled"])
@pytest.mark.parametrize("family", list(FAMILIES))
def test_fold_errors_equal_exact_refits(kind, family):
    rng = np.random.default_rng(zlib.crc32(f"{kind}/{family}".encode()))
    n = 157
    X = _designs(kind, rng, n)
    Xc = (X[:, 1:] - X[:, 1:].mean(0)) / X[:, 1:].std(0)
    y = np.exp(1.5 + 0.1 * Xc.sum(axis=1) + rng.normal(0, 0.1, n))
    plan = make_plan(n, 5, 2, 3)
    t, fwd, inv = FAMILIES[family]
    bank = ColumnBank.of_matrix(X, FoldIndex.of(plan, n))
    res = Scorer(bank, y, plan, False).score(t, list(range(X.shape[1])))
    _, errs = _lstsq_cv(X, y, fwd, inv, plan)
    # source: exact refit per fold (numpy lstsq) with smearing written out; rel 1e-8
    np.testing.assert_allclose(res.fold_values, errs, rtol=1e-8)
    if kind == "collinear":
        assert res.exact_refits == plan.n_splits  # every fold took the QR path


@pytest.mark.parametrize("kind", ["random", "badly_scaled"])
def test_downdated_solutions_equal_lstsq(kind):
    rng = np.random.default_rng(4)
    n = 203
    X = _designs(kind, rng, n)
    z = (X / np.abs(X).max(axis=0)) @ rng.normal(0, 1, X.shape[1]) + rng.normal(0, 0.1, n)
    plan = make_plan(n, 7, 1, 9)
    bank = ColumnBank.of_matrix(X, FoldIndex.of(plan, n))
    S = np.arange(X.shape[1])
    G = bank.train_grams(S, 0)
    cf, ctot = bank.cross("z", z)
    B, ok = solve_batch(G, ctot[0][None, :] - cf[0])
    a = plan.assignments[0]
    for k in range(plan.folds):
        trn = a != k
        # source: direct training cross-products and numpy.linalg.lstsq on the fold's rows
        np.testing.assert_allclose(
            G[k], X[trn].T @ X[trn], rtol=1e-12, atol=1e-12 * np.abs(G[k]).max()
        )
        scale = np.sqrt(np.sum(X[trn] ** 2, axis=0))
        ref = np.linalg.lstsq(X[trn] / scale, z[trn], rcond=None)[0] / scale
        if ok[k]:
            np.testing.assert_allclose(B[k], ref, rtol=1e-8, atol=1e-8 * np.abs(ref).max())
    assert ok.all()


def test_ill_conditioned_gram_is_flagged_for_refit():
    rng = np.random.default_rng(1)
    n = 80
    x = rng.normal(0, 1, n)
    X = np.column_stack([np.ones(n), x, x + 1e-7 * rng.normal(0, 1, n)])
    _, ok = solve_batch((X.T @ X)[None], (X.T @ rng.normal(0, 1, n))[None])
    # source: cond(X'X) ~ 1e15 > 1e7 (column-scaled), so Cholesky is not trusted
    assert not ok[0]


def _mp_smear(eta, e, beta, gamma, delta, p, zero):
    mpmath.mp.dps = 40
    out = []
    for h in eta:
        tot, cnt = mpmath.mpf(0), 0
        for v in e:
            base = mpmath.mpf(gamma) + mpmath.mpf(delta) * (mpmath.mpf(h) + mpmath.mpf(v))
            if base > 0:
                tot += mpmath.mpf(beta) * base ** mpmath.mpf(p)
                cnt += 1
            elif zero:
                cnt += 1
        out.append(float(tot / cnt) if cnt else math.nan)
    return np.array(out)


@pytest.mark.parametrize(
    "t, centre",
    [
        pytest.param(tr.Transform("square"), 0.5, id="square-clip"),
        pytest.param(tr.Transform("reciprocal"), 2.5, id="reciprocal-pole"),
        pytest.param(tr.Transform("power", exponent=-0.5), 3.0, id="power-pole"),
        pytest.param(tr.Transform("box_cox", lam=0.4), -1.0, id="box_cox-clip"),
        pytest.param(tr.Transform("box_cox", lam=-0.7), 0.6, id="box_cox-pole"),
    ],
)
def test_tree_smearing_within_its_stated_bound(t, centre):
    rng = np.random.default_rng(17)
    e = rng.normal(0, 0.8, 700)
    e -= e.mean()
    eta = rng.uniform(centre - 1.5, centre + 1.5, 30)
    form = st.power_form(t)
    beta, gamma, delta, p, _zero = form
    # keep every defined term's base above 1e-3 (rounding of a base near 0 is not the tree's
    # error); the tree still has to split blocks and sum leaves near the singular point
    keep = []
    for h in eta:
        base = gamma + delta * (h + e)
        pos = base[base > 0]
        keep.append(pos.size == 0 or pos.min() > 1e-3)
    eta = eta[np.array(keep)]
    assert eta.size >= 10
    fast = st.smear_power(eta, e, *form)
    root, done = st.smear_power_root(eta, e, beta, gamma, delta, p)
    ref = _mp_smear(eta, e, *form)
    ok = np.isfinite(ref)
    assert np.array_equal(ok, np.isfinite(fast))
    bound = st.TREE_RTOL + 1e-12
    # source: 40-digit mpmath sum of the smearing terms; the stated bound TREE_RTOL + rounding
    assert np.all(np.abs(fast[ok] - ref[ok]) <= bound * np.abs(ref[ok]))
    if done.any():
        assert np.all(np.abs(root[done] - ref[done]) <= bound * np.abs(ref[done]))


def test_root_series_rho_limit_meets_the_bound():
    # source: direct summation of the binomial series tail sum_{t>=J} |C(p,t)| rho^t to
    # t = J + 3000 (rho < 1, terms decay geometrically), divided by min (1 +- rho)^p
    for p in (0.5, -1.0, -2.0, 2.5, 1 / 0.3, -1 / 0.7, 12.0, 45.5):
        rho = st._rho_ok(p)
        assert 0.0 < rho < 1.0
        c = 1.0
        tail = 0.0
        for t in range(st.J + 3000):
            if t >= st.J:
                tail += abs(c) * rho**t
            c = c * (p - t) / (t + 1)
        m = (1 - rho) ** p if p > 0 else (1 + rho) ** p
        assert tail / m <= st.TREE_RTOL * (1 + 1e-9)
