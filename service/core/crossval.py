"""K-fold cross-validation with errors measured on the ORIGINAL response scale.

Every candidate is scored on the same seeded partitions (paired comparisons
are less noisy).  Inside each training fold everything estimated from the
response is estimated again (Box-Cox / Yeo-Johnson lambda, the shift of a
log when the response has zeros) and the held-out predictions are
back-transformed: the smeared mean (Duan 1983) for squared error, the naive
inverse (a median) for absolute and percentage errors, each the minimiser of
its own loss.

The per-fold least squares come from downdated cross-product matrices
(:mod:`bank`, :mod:`fastcv`); :func:`cross_validate` scores one design that way and
returns a :class:`cvresult.CVResult`.

Fold plans (:class:`folds.CVPlan`, :func:`folds.make_plan`) live in :mod:`folds`.
"""

from __future__ import annotations

import numpy as np

from . import transforms as tr
from .bank import ColumnBank, FoldIndex
from .cvresult import CVResult
from .fastcv import Scorer
from .folds import CVPlan


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
    return scorer.score(response_transform, cols, names, keep_out_of_fold=keep_out_of_fold)
