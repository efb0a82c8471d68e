"""K-fold cross-validation with errors measured on the ORIGINAL response scale.

Every candidate is scored on the same seeded partitions (paired comparisons
are less noisy).  Inside each training fold everything estimated from the
response is estimated again (Box-Cox / Yeo-Johnson lambda, the shift of a
log when the response has zeros) and the held-out predictions are
back-transformed: the smeared mean (Duan 1983) for squared error, the naive
inverse (a median) for absolute and percentage errors, each the minimiser of
its own loss.

The per-fold least squares come from downdated cross-product matrices
(:mod:`bank`, :mod:`fastcv`); :func:`cross_validate` scores one design that way.

Fold plans (:class:`folds.CVPlan`, :func:`folds.make_plan`) live in :mod:`folds`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from . import transforms as tr
from .bank import ColumnBank, FoldIndex
from .fastcv import OutOfFold, Score, Scorer
from .folds import CVPlan


@dataclass
class CVResult:
    metric: str
    value: float
    std_error: float
    fold_values: np.ndarray  # (repeats * folds,) metric per held-out fold
    summary: dict[str, Any]  # all metrics: {"rmse": v, "mae": v, "mape": v | None}
    fold_lambdas: list[float] | None = None
    fold_powers: list[list[float]] | None = None  # per fold: estimated predictor powers
    exact_refits: int = 0  # folds refitted by QR because their Gram matrix was ill-conditioned
    out_of_fold: OutOfFold | None = None  # first repeat's fold fits (CV+ intervals), when asked

    def to_dict(self, plan: CVPlan) -> dict[str, Any]:
        return {
            "metric": self.metric,
            "value": self.value,
            "std_error": self.std_error,
            "scale": "original",
            "folds": plan.folds,
            "repeats": plan.repeats,
            "seed": plan.seed,
            "scheme": plan.scheme,
            "all_metrics": self.summary,
            "back_transform": "smeared mean (Duan 1983)"
            if self.metric == "rmse"
            else "median (naive inverse)",
        }


def cross_validate(
    X: np.ndarray,
    y: np.ndarray,
    response_transform: tr.Transform,
    plan: CVPlan,
    shift_needed: bool,
    names: list[str] | None = None,
    keep_out_of_fold: bool = False,
) -> CVResult:
    """Score one candidate.  ``X``: (n, p) full design; ``y``: (n,) original response.

    Per-fold solutions come from downdated cross-product matrices with an exact
    refit where they are ill-conditioned (see :mod:`fastcv`).  Raises
    :class:`CandidateFailure` when any fold cannot be fitted or its
    back-transform is undefined for a held-out row (e.g. a reciprocal model
    predicting a non-positive 1/y).
    """
    X = np.asarray(X, dtype=float)
    bank = ColumnBank.of_matrix(X, FoldIndex.of(plan, X.shape[0]))
    scorer = Scorer(bank, y, plan, shift_needed)
    cols = list(range(X.shape[1]))
    return from_score(
        scorer.score(response_transform, cols, names, keep_out_of_fold=keep_out_of_fold)
    )


def from_score(s: Score) -> CVResult:
    """A :class:`fastcv.Score` as the public :class:`CVResult`."""
    return CVResult(
        s.metric,
        s.value,
        s.std_error,
        s.fold_values,
        s.summary,
        s.fold_lambdas,
        s.fold_powers,
        s.exact_refits,
        s.out_of_fold,
    )
