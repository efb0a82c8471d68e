"""What cross-validating one candidate gives back, and the one place its errors are formed.

:class:`CVResult` is returned by every scoring path (:meth:`fastcv.Scorer.score`,
:func:`batchcv.score_many`, :func:`crossval.cross_validate`) and kept by the search.
:func:`error_of` turns every held-out row's error into RMSE, MAE or MAPE: a fold's error
(its held-out rows), a repeat's pooled error (all rows once), for one candidate or for a
batch of candidates side by side, and the pooled error of a set of folds from their fold
errors (weighted by their row counts).  :func:`summary_of` and :func:`std_error_of` state
how the repeats are combined and how uncertain the combined value is.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from . import transforms as tr

if TYPE_CHECKING:  # pragma: no cover
    from .folds import CVPlan


@dataclass
class Dynamic:
    """Design columns whose power is estimated inside every training fold."""

    positions: list[int]  # where they sit in the candidate's design
    x: np.ndarray  # (n, k) positive predictor values
    start: np.ndarray  # (k,) all-rows estimate (warm start)
    boxcox_form: bool = True
    columns: tuple[str, ...] = ()  # the predictor columns, in design order


@dataclass
class OutOfFold:
    """What the first repeat's K training fits leave behind, for CV+ prediction intervals.

    ``fold``: (n,) fold id of every row; ``residual``: (n,) model-scale residual of every
    row under the fit that did not see it, z_k(y_i) - x_i'b_k with k = fold[i] and z_k the
    response scale fitted on that fold's training rows; ``coefficients``: (K, p) the
    training fits b_k; ``transforms``: the K concrete response scales z_k.  With predictor
    powers estimated inside every fold, ``dynamic`` says where their columns sit and
    ``powers`` (K, j) holds fold k's estimates (fold k's design has w(x; powers[k]) there).
    """

    fold: np.ndarray
    residual: np.ndarray
    coefficients: np.ndarray
    transforms: list[tr.Transform]
    dynamic: Dynamic | None = None
    powers: np.ndarray | None = None


#: the error metrics every scoring path computes, in the order they are reported
METRICS = ("rmse", "mae", "mape")


@dataclass(frozen=True)
class Metrics:
    """Every metric's cross-validated value: RMSE, MAE and MAPE (``mape`` None when the
    response has a zero)."""

    rmse: float
    mae: float
    mape: float | None

    def of(self, metric: str) -> float | None:
        """The value of ``metric`` (one of :data:`METRICS`)."""
        if metric not in METRICS:
            raise KeyError(metric)
        value: float | None = getattr(self, metric)
        return value


@dataclass
class CVResult:
    """One candidate's cross-validated errors on the original response scale."""

    metric: str
    value: float
    std_error: float
    fold_values: np.ndarray  # (repeats * folds,) metric per held-out fold
    summary: Metrics  # every metric's value
    fold_lambdas: list[float] | None = None
    fold_powers: list[list[float]] | None = None  # per fold: estimated predictor powers
    exact_refits: int = 0  # folds refitted by QR because their Gram matrix was ill-conditioned
    out_of_fold: OutOfFold | None = None  # first repeat's fold fits (CV+ intervals), when asked


@dataclass(frozen=True)
class CVReport:
    """A candidate's cross-validated error as reported: the metric, its value and standard
    error on the original response scale, every metric's value (``all_metrics``), and the
    fold scheme that produced them."""

    metric: str
    value: float
    std_error: float
    all_metrics: Metrics
    folds: int
    repeats: int
    seed: int
    scheme: str

    @classmethod
    def of(cls, cv: CVResult, plan: CVPlan) -> CVReport:
        return cls(
            cv.metric,
            cv.value,
            cv.std_error,
            cv.summary,
            plan.folds,
            plan.repeats,
            plan.seed,
            plan.scheme,
        )

    @property
    def back_transform(self) -> str:
        """How a prediction on the original scale was formed for this metric."""
        return "smeared mean (Duan 1983)" if self.metric == "rmse" else "median (naive inverse)"


def error_of(
    metric: str,
    sq: np.ndarray,
    ab: np.ndarray,
    pc: np.ndarray | None,
    weights: np.ndarray | None = None,
) -> np.ndarray:
    """``metric`` over axis 0 of every row's squared error ``sq`` (rmse), absolute error
    ``ab`` (mae) and absolute relative error ``pc`` (mape; None where it is undefined,
    which gives NaN): RMSE = sqrt(mean sq), MAE = mean ab, MAPE = 100 mean pc.  Columns
    (axis 1) are candidates scored side by side.  ``weights``: the rows each entry stands
    for (a fold's mean error in place of its rows), so fold errors pool to the error of
    their rows together."""
    if metric == "rmse":
        return np.sqrt(np.average(sq, axis=0, weights=weights))
    if metric == "mae":
        return np.asarray(np.average(ab, axis=0, weights=weights))
    if pc is None:
        return np.full(np.shape(sq)[1:], math.nan)
    return 100.0 * np.average(pc, axis=0, weights=weights)


def pooled_folds(metric: str, values: np.ndarray, sizes: np.ndarray) -> float:
    """The error of the rows of several folds together, from each fold's error ``values``
    and row count ``sizes`` (a fold's RMSE squared is its mean squared error, its MAPE a
    hundred times its mean relative error)."""
    v = np.asarray(values, dtype=float)
    return float(error_of(metric, v * v, v, v / 100.0, weights=np.asarray(sizes, dtype=float)))


def summary_of(rmse: np.ndarray, mae: np.ndarray, mape: np.ndarray | None) -> Metrics:
    """Every metric's cross-validated value: the mean over repeats of each repeat's pooled
    error (``mape`` None when the response has a zero)."""
    return summaries_of(
        np.reshape(rmse, (1, -1)),
        np.reshape(mae, (1, -1)),
        None if mape is None else np.reshape(mape, (1, -1)),
    )[0]


def summaries_of(rmse: np.ndarray, mae: np.ndarray, mape: np.ndarray | None) -> list[Metrics]:
    """:func:`summary_of` of many candidates: row c of each (C, R) array holds candidate c's
    pooled error in every repeat."""
    means = [np.mean(v, axis=1).tolist() for v in (rmse, mae)]
    mapes = np.mean(mape, axis=1).tolist() if mape is not None else [None] * len(means[0])
    return [Metrics(a, b, c) for a, b, c in zip(means[0], means[1], mapes, strict=True)]


def std_error_of(fold_values: np.ndarray, folds: int) -> float:
    """The standard deviation of the R x K fold errors (or of two candidates' paired fold
    differences) divided by sqrt(K): repeats do not add independent information (Bengio &
    Grandvalet 2004: no unbiased estimator exists; this one is naive).  0 with a single
    fold value."""
    return float(std_errors_of(np.reshape(fold_values, (1, -1)), folds)[0])


def std_errors_of(fold_values: np.ndarray, folds: int) -> np.ndarray:
    """:func:`std_error_of` of every row of ``fold_values`` (C, R x K): many candidates."""
    if fold_values.shape[1] <= 1:
        return np.zeros(fold_values.shape[0])
    out: np.ndarray = np.std(fold_values, axis=1, ddof=1) / math.sqrt(folds)
    return out
