"""Every transformed column of a search, computed once, with per-fold cross-product matrices.

A search scores many candidates that share columns: the intercept, each
transform of each numeric predictor, the dummies of each categorical one.  The
bank holds them as one (n, m) matrix and, for every cross-validation split
(repeat r, fold k), the fold's cross-product matrix G_rk = X_k'X_k.  The
training matrix of a candidate with columns S is the sub-block
(G_r - G_rk)[S, S] with G_r = sum_k G_rk (fold downdating), so a candidate's
per-fold least squares costs O(p^3) instead of a refit over the rows.

When the matrices of every split would not fit the memory budget (many
repeats times many columns), the bank keeps the columns only and candidates
compute their own per-fold matrices from their p columns (O(n p^2)).
"""

from __future__ import annotations

from collections.abc import Hashable
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from ._types import FloatArray

if TYPE_CHECKING:  # pragma: no cover
    from .folds import CVPlan

GRAM_BUDGET_BYTES = 256 * 1024 * 1024


@dataclass
class FoldIndex:
    """Row indices of every split of a plan (sorted), and fold sizes."""

    n: int
    folds: int
    repeats: int
    assignments: tuple[np.ndarray, ...]
    test: list[list[np.ndarray]]  # [repeat][fold]
    train: list[list[np.ndarray]]

    @classmethod
    def of(cls, plan: CVPlan, n: int) -> FoldIndex:
        test, train = [], []
        for a in plan.assignments:
            order = np.argsort(a, kind="stable")
            bounds = np.concatenate([[0], np.cumsum(np.bincount(a, minlength=plan.folds))])
            te = [np.sort(order[bounds[k] : bounds[k + 1]]) for k in range(plan.folds)]
            test.append(te)
            train.append([np.flatnonzero(a != k) for k in range(plan.folds)])
        return cls(n, plan.folds, plan.repeats, plan.assignments, test, train)


class ColumnBank:
    """Columns keyed by (column name, transform) plus per-fold Gram matrices."""

    def __init__(self, n: int, index: FoldIndex):
        self.n = n
        self.index = index
        self._cols: list[np.ndarray] = []
        self.keys: dict[Hashable, int] = {}
        self.X: FloatArray | None = None
        self.G_fold: FloatArray | None = None  # (R, K, m, m)
        self.G_total: FloatArray | None = None  # (R, m, m)
        self._cross: dict[Hashable, tuple[np.ndarray, np.ndarray]] = {}

    @classmethod
    def of_matrix(cls, X: np.ndarray, index: FoldIndex) -> ColumnBank:
        bank = cls(X.shape[0], index)
        for j in range(X.shape[1]):
            bank.add(("column", j), X[:, j])
        bank.freeze()
        return bank

    @property
    def m(self) -> int:
        return len(self._cols) if self.X is None else self.X.shape[1]

    def add(self, key: Hashable, values: np.ndarray) -> int:
        if key in self.keys:
            return self.keys[key]
        if self.X is not None:
            raise RuntimeError("the bank is frozen")
        self._cols.append(np.asarray(values, dtype=float))
        self.keys[key] = len(self._cols) - 1
        return self.keys[key]

    def freeze(self) -> None:
        """Stack the columns and compute every split's cross-product matrix."""
        if self.X is not None:
            return
        m = len(self._cols)
        X = np.empty((self.n, m), order="F")
        for j in range(m):
            X[:, j] = self._cols[j]
            self._cols[j] = X[:, j]  # the column's own array goes now: one copy at a time
        self._cols = []
        self.X = X
        R, K = self.index.repeats, self.index.folds
        if R * (K + 1) * m * m * 8 > GRAM_BUDGET_BYTES:
            return
        self.G_fold = np.empty((R, K, m, m))
        with np.errstate(over="ignore", invalid="ignore"):  # non-finite sums: refit exactly
            for r in range(R):
                for k in range(K):
                    Xk = X[self.index.test[r][k]]
                    self.G_fold[r, k] = Xk.T @ Xk
            self.G_total = self.G_fold.sum(axis=1)

    def _frozen(self) -> FloatArray:
        """The stacked columns; only a frozen bank has them."""
        if self.X is None:
            raise RuntimeError("the bank is not frozen yet; call freeze() first")
        return self.X

    def columns(self, S: np.ndarray | list[int]) -> np.ndarray:
        return self._frozen()[:, S]

    def fold_grams(self, S: np.ndarray, r: int) -> np.ndarray:
        """(K, p, p) held-out cross-products X_k[:, S]'X_k[:, S] of repeat r."""
        if self.G_fold is not None:
            ix = np.ix_(S, S)
            G: np.ndarray = self.G_fold[r][:, ix[0], ix[1]]
            return G
        out = []
        with np.errstate(over="ignore", invalid="ignore"):
            for rows in self.index.test[r]:
                Xk = self._frozen()[np.ix_(rows, S)]
                out.append(Xk.T @ Xk)
        return np.stack(out)

    def train_grams(self, S: np.ndarray, r: int) -> np.ndarray:
        """(K, p, p) training cross-products of columns S in repeat r: G_r[S,S] - G_rk[S,S]."""
        Gk: FloatArray = self.fold_grams(S, r)
        tot: FloatArray = (
            self.G_total[r][np.ix_(S, S)] if self.G_total is not None else Gk.sum(axis=0)
        )
        return tot[None, :, :] - Gk

    def cross(self, key: Hashable, z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Per split X_k'z (R, K, m) and its total (R, m), cached under ``key``."""
        if key not in self._cross:
            R, K = self.index.repeats, self.index.folds
            cf = np.empty((R, K, self.m))
            with np.errstate(over="ignore", invalid="ignore"):  # checked by the solver
                for r in range(R):
                    for k in range(K):
                        rows = self.index.test[r][k]
                        cf[r, k] = self._frozen()[rows].T @ z[rows]
                self._cross[key] = (cf, cf.sum(axis=1))
        return self._cross[key]
