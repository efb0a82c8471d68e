"""Seeded fold plans shared by every candidate of a request.

Fold assignment: repeat r uses the r-th permutation drawn from
``numpy.random.RandomState(seed)``; fold k takes the next ``n//K + (k < n%K)``
entries.  Repeat 0 therefore equals ``sklearn.model_selection.KFold(K,
shuffle=True, random_state=seed)``.  Blocked plans put contiguous runs of the rows'
order in each fold instead.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

#: the seed of the fold partitions (and of the figures' thinning) when a request gives none
DEFAULT_SEED = 0


@dataclass(frozen=True)
class CVPlan:
    folds: int
    repeats: int
    seed: int
    metric: str
    assignments: tuple[np.ndarray, ...]  # per repeat: (n,) fold id of each row
    scheme: str = "random"  # "random" K-fold or "blocked" (contiguous in the rows' order)

    @property
    def n_splits(self) -> int:
        return self.folds * self.repeats


def make_plan(
    n: int,
    folds: int = 5,
    repeats: int = 1,
    seed: int = DEFAULT_SEED,
    metric: str = "rmse",
    scheme: str = "random",
    order: np.ndarray | None = None,
) -> CVPlan:
    """Fold ids per repeat.  ``scheme="blocked"``: one partition into contiguous runs of
    ``order`` (the permutation putting rows in the order column's order; None: row
    order), the same fold sizes as random K-fold, no shuffling, so ``repeats`` must be 1."""
    rs = np.random.RandomState(seed)
    out = []
    sizes = np.full(folds, n // folds)
    sizes[: n % folds] += 1
    bounds = np.concatenate([[0], np.cumsum(sizes)])
    if scheme == "blocked":
        if repeats != 1:
            raise ValueError("blocked folds have a single partition (repeats must be 1)")
        perm = np.arange(n) if order is None else np.asarray(order, dtype=np.intp)
        a = np.empty(n, dtype=np.int32)
        for k in range(folds):
            a[perm[bounds[k] : bounds[k + 1]]] = k
        return CVPlan(folds, 1, seed, metric, (a,), "blocked")
    for _ in range(repeats):
        perm = rs.permutation(n)
        a = np.empty(n, dtype=np.int32)
        for k in range(folds):
            a[perm[bounds[k] : bounds[k + 1]]] = k
        out.append(a)
    return CVPlan(folds, repeats, seed, metric, tuple(out))
