"""The column bank (service/core/bank.py): per-fold cross-products by downdating against
direct numpy products and numpy.linalg.lstsq on each fold's training rows.

Designs: random, collinear (a column equal to another plus 1% noise) and badly scaled
(columns on 1e-6 .. 1e6 beside a calendar year).  Tolerances (fixed in advance): Gram
matrices rel 1e-12 of their largest entry; solutions rel 1e-8 of the largest coefficient
(badly scaled and collinear designs lose digits in any method; lstsq on the column-scaled
rows is the reference).
"""

from __future__ import annotations

import numpy as np
import pytest
from service.core import bank as bank_module
from service.core.bank import ColumnBank, FoldIndex
from service.core.fitting import solve_batch
from service.core.folds import make_plan

KINDS = ["random", "collinear", "badly_scaled"]


def _design(kind: str, rng, n: int) -> np.ndarray:
    x1 = rng.uniform(1, 5, n)
    x2 = rng.normal(0, 1, n)
    if kind == "random":
        return np.column_stack([np.ones(n), x1, x2, rng.uniform(0, 1, n)])
    if kind == "collinear":
        return np.column_stack([np.ones(n), x1, x1 + 0.01 * rng.normal(0, 1, n), x2])
    return np.column_stack(
        [np.ones(n), 1e6 * x1, 1e-6 * rng.uniform(1, 2, n), 1990.0 + rng.uniform(0, 30, n)]
    )


def _bank(X: np.ndarray, folds: int, repeats: int, seed: int):
    plan = make_plan(X.shape[0], folds, repeats, seed)
    return plan, ColumnBank.of_matrix(X, FoldIndex.of(plan, X.shape[0]))


@pytest.mark.parametrize("kind", KINDS)
def test_downdated_solutions_equal_lstsq(kind):
    rng = np.random.default_rng(4)
    n = 203
    X = _design(kind, rng, n)
    z = (X / np.abs(X).max(axis=0)) @ rng.normal(0, 1, X.shape[1]) + rng.normal(0, 0.1, n)
    plan, bank = _bank(X, 7, 2, 9)
    S = np.arange(X.shape[1])
    cf, ctot = bank.cross("z", z)
    for r, a in enumerate(plan.assignments):
        G = bank.train_grams(S, r)
        B, ok = solve_batch(G, ctot[r][None, :] - cf[r])
        assert ok.all()
        for k in range(plan.folds):
            trn = a != k
            # source: direct training cross-products of the fold's rows (numpy)
            np.testing.assert_allclose(
                G[k], X[trn].T @ X[trn], rtol=1e-12, atol=1e-12 * np.abs(G[k]).max()
            )
            # source: numpy.linalg.lstsq on the column-scaled training rows
            scale = np.sqrt(np.sum(X[trn] ** 2, axis=0))
            ref = np.linalg.lstsq(X[trn] / scale, z[trn], rcond=None)[0] / scale
            np.testing.assert_allclose(B[k], ref, rtol=1e-8, atol=1e-8 * np.abs(ref).max())


def test_sub_blocks_of_a_column_subset_equal_direct_products():
    rng = np.random.default_rng(11)
    X = _design("random", rng, 90)
    plan, bank = _bank(X, 5, 1, 3)
    S = np.array([3, 0])  # any subset, any order
    a = plan.assignments[0]
    held = bank.fold_grams(S, 0)
    for k in range(5):
        te = a == k
        # source: numpy products of the held-out rows' selected columns
        np.testing.assert_allclose(held[k], X[te][:, S].T @ X[te][:, S], rtol=1e-13)
    assert bank.m == 4 and np.array_equal(bank.columns(S), X[:, S])


def test_without_stored_grams_the_same_matrices_are_computed(monkeypatch):
    rng = np.random.default_rng(12)
    X = _design("badly_scaled", rng, 77)
    _, stored = _bank(X, 4, 3, 5)
    monkeypatch.setattr(bank_module, "GRAM_BUDGET_BYTES", 0)  # every split over the budget
    _, lean = _bank(X, 4, 3, 5)
    assert stored.G_fold is not None and lean.G_fold is None
    S = np.arange(4)
    for r in range(3):
        np.testing.assert_allclose(
            lean.train_grams(S, r),
            stored.train_grams(S, r),
            rtol=1e-12,
            atol=1e-12 * np.abs(stored.train_grams(S, r)).max(),
        )


def test_fold_index_partitions_every_repeat():
    plan = make_plan(53, 6, 2, 1)
    index = FoldIndex.of(plan, 53)
    for r in range(2):
        rows = np.concatenate(index.test[r])
        assert np.array_equal(np.sort(rows), np.arange(53))  # every row held out once
        for k in range(6):
            assert np.intersect1d(index.test[r][k], index.train[r][k]).size == 0
            assert index.test[r][k].size + index.train[r][k].size == 53


def test_columns_are_kept_once_and_a_frozen_bank_takes_no_new_ones():
    plan = make_plan(10, 2, 1, 0)
    bank = ColumnBank(10, FoldIndex.of(plan, 10))
    assert bank.add(("x", "log"), np.arange(10.0)) == 0
    assert bank.add(("x", "log"), np.ones(10)) == 0  # same key: same column, not a copy
    with pytest.raises(RuntimeError, match="not frozen"):
        bank.columns([0])
    bank.freeze()
    with pytest.raises(RuntimeError, match="frozen"):
        bank.add(("w", "identity"), np.ones(10))
