"""Per-fold scoring (service/core/fastcv.py) against exact refits: fold errors from downdated
Gram matrices and the exact-refit fallback on ill-conditioned designs.  (The downdating itself
is checked in test_bank.py, the solver in test_fitting.py, the smearing shortcuts in
test_smear_tree.py.)

Tolerance (fixed in advance): fold errors rel 1e-8 against numpy.linalg.lstsq refits with
smearing written out (Duan 1983).
"""

from __future__ import annotations

import math
import zlib

import numpy as np
import pytest
from service.core import transforms as tr
from service.core.bank import ColumnBank, FoldIndex
from service.core.fastcv import Scorer
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


@pytest.mark.parametrize("family", ["identity", "log"])
def test_out_of_fold_alone_equals_the_first_repeat_of_a_full_scoring(family):
    """The CV+ block is the first repeat's fits and held-out residuals; computing it alone
    must give exactly what a full scoring keeps, and the residuals must be the lstsq ones."""
    rng = np.random.default_rng(11)
    n = 90
    X = _designs("random", rng, n)
    y = np.exp(1.0 + 0.2 * X[:, 1] + rng.normal(0, 0.1, n))
    plan = make_plan(n, 4, 3, 8)
    t, fwd, inv = FAMILIES[family]
    scorer = Scorer(ColumnBank.of_matrix(X, FoldIndex.of(plan, n)), y, plan, False)
    cols = list(range(X.shape[1]))
    full = scorer.score(t, cols, keep_out_of_fold=True).out_of_fold
    alone = scorer.out_of_fold(t, cols)
    assert full is not None
    np.testing.assert_array_equal(alone.fold, full.fold)
    np.testing.assert_array_equal(alone.residual, full.residual)
    np.testing.assert_array_equal(alone.coefficients, full.coefficients)
    sols, _ = _lstsq_cv(X, y, fwd, inv, plan)
    # source: numpy lstsq refits of the first repeat's folds (rows of _lstsq_cv's output)
    np.testing.assert_allclose(alone.coefficients, sols[: plan.folds], rtol=1e-8)
    a = plan.assignments[0]
    expect = fwd(y) - np.einsum("ij,ij->i", X, sols[a])
    np.testing.assert_allclose(alone.residual, expect, rtol=1e-8, atol=1e-12)
