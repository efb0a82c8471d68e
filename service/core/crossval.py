"""K-fold cross-validation with errors measured on the ORIGINAL response scale.

Every candidate is scored on the same seeded partitions (paired comparisons
are less noisy).  Inside each training fold everything estimated from the
response is estimated again (Box-Cox / Yeo-Johnson lambda, the shift of a
log when the response has zeros) and the held-out predictions are
back-transformed: the smeared mean (Duan 1983) for squared error, the naive
inverse (a median) for absolute and percentage errors, each the minimiser of
its own loss.

Fold assignment: repeat r uses the r-th permutation drawn from
``numpy.random.RandomState(seed)``; fold k takes the next ``n//K + (k < n%K)``
entries.  Repeat 0 therefore equals ``sklearn.model_selection.KFold(K,
shuffle=True, random_state=seed)``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
from scipy import linalg

from . import retransform
from . import transforms as tr
from .errors import CandidateFailure
from .fitting import qr_solve

METRICS = ("rmse", "mae", "mape")


@dataclass(frozen=True)
class CVPlan:
    folds: int
    repeats: int
    seed: int
    metric: str
    assignments: tuple[np.ndarray, ...]  # per repeat: (n,) fold id of each row

    @property
    def n_splits(self) -> int:
        return self.folds * self.repeats


def make_plan(n: int, folds: int = 5, repeats: int = 1, seed: int = 0,
              metric: str = "rmse") -> CVPlan:
    rs = np.random.RandomState(seed)
    out = []
    sizes = np.full(folds, n // folds)
    sizes[: n % folds] += 1
    bounds = np.concatenate([[0], np.cumsum(sizes)])
    for _ in range(repeats):
        perm = rs.permutation(n)
        a = np.empty(n, dtype=np.int32)
        for k in range(folds):
            a[perm[bounds[k]:bounds[k + 1]]] = k
        out.append(a)
    return CVPlan(folds, repeats, seed, metric, tuple(out))


@dataclass
class CVResult:
    metric: str
    value: float
    std_error: float
    fold_values: np.ndarray  # (repeats * folds,) metric per held-out fold
    summary: dict  # all metrics: {"rmse": v, "mae": v, "mape": v | None}
    fold_lambdas: list[float] | None = None

    def to_dict(self, plan: CVPlan) -> dict:
        return {"metric": self.metric, "value": self.value, "std_error": self.std_error,
                "scale": "original", "folds": plan.folds, "repeats": plan.repeats,
                "seed": plan.seed, "all_metrics": self.summary,
                "back_transform": "smeared mean (Duan 1983)" if self.metric == "rmse"
                else "median (naive inverse)"}


def fold_solve(X: np.ndarray, z: np.ndarray, names: list[str] | None = None) -> np.ndarray:
    """Least squares for one training fold: Cholesky of the column-scaled Gram matrix.

    Falls back to the pivoted QR of :func:`fitting.qr_solve` (which also
    detects rank deficiency) when the scaled Gram matrix is ill-conditioned,
    so accuracy never drops below a QR solution's.
    """
    n, p = X.shape
    if n <= p:
        raise CandidateFailure(f"{n} training rows cannot estimate {p} coefficients")
    scale = np.sqrt(np.einsum("ij,ij->j", X, X))
    if np.all(scale > 0):
        Xs = X / scale
        G = Xs.T @ Xs
        ev = np.linalg.eigvalsh(G)
        if ev[0] > 1e-7 * ev[-1]:  # cond(G) < 1e7: Cholesky keeps ~9 digits
            c = linalg.cho_factor(G, check_finite=False)
            return linalg.cho_solve(c, Xs.T @ z, check_finite=False) / scale
    coef, _, _ = qr_solve(X, z, names, with_condition=False)
    return coef


def _metric(kind: str, y: np.ndarray, mean_pred: np.ndarray, median_pred: np.ndarray) -> float:
    if kind == "rmse":
        d = y - mean_pred
        return float(np.sqrt(np.mean(d * d)))
    if kind == "mae":
        return float(np.mean(np.abs(y - median_pred)))
    return float(100.0 * np.mean(np.abs((y - median_pred) / y)))


def cross_validate(X: np.ndarray, y: np.ndarray, response_transform: tr.Transform, plan: CVPlan,
                   shift_needed: bool, names: list[str] | None = None) -> CVResult:
    """Score one candidate.  ``X``: (n, p) full design; ``y``: (n,) original response.

    Raises :class:`CandidateFailure` when any fold cannot be fitted or its
    back-transform is undefined for a held-out row (e.g. a reciprocal model
    predicting a non-positive 1/y).
    """
    metric = plan.metric
    want_mape = bool(np.all(y != 0))
    fold_vals = np.empty(plan.n_splits)
    pooled = {"rmse": [], "mae": [], "mape": []}
    lambdas: list[float] = []
    estimate_lam = response_transform.name in ("box_cox", "yeo_johnson") and \
        not response_transform.is_fitted
    near = None
    if estimate_lam:
        try:
            near = tr.fit_transform(response_transform, y, X).lam
        except ValueError as exc:
            raise CandidateFailure(str(exc)) from None
    j = 0
    for r, assign in enumerate(plan.assignments):
        sq = np.empty(y.size)
        ab = np.empty(y.size)
        pc = np.empty(y.size)
        for k in range(plan.folds):
            test = assign == k
            train = ~test
            Xtr, ytr = X[train], y[train]
            try:
                t = tr.fit_transform(response_transform, ytr, Xtr, shift_needed=shift_needed,
                                     near=near)
            except ValueError as exc:
                raise CandidateFailure(f"fold {k + 1}: {exc}") from None
            if estimate_lam:
                lambdas.append(float(t.lam))
            ztr = t.forward(ytr)
            if not np.all(np.isfinite(ztr)):
                raise CandidateFailure(f"fold {k + 1}: {t.label('y')} overflows on the training rows")
            try:
                coef = fold_solve(Xtr, ztr, names)
            except CandidateFailure as exc:
                raise CandidateFailure(f"fold {k + 1}: {exc.reason}") from None
            e = ztr - Xtr @ coef
            eta = X[test] @ coef
            med = retransform.naive(t, eta)
            bad = ~np.isfinite(med)
            if not np.any(bad):
                mean = retransform.smeared_mean(t, eta, e)
                bad = ~np.isfinite(mean)
            if np.any(bad):
                raise CandidateFailure(
                    f"fold {k + 1}: the back-transform of {t.label('y')} is undefined or "
                    f"overflows for {int(bad.sum())} held-out row(s) (prediction outside the "
                    "scale's range)")
            yt = y[test]
            sq[test] = (yt - mean) ** 2
            ab[test] = np.abs(yt - med)
            if want_mape:
                pc[test] = np.abs((yt - med) / yt)
            fold_vals[j] = _metric(metric, yt, mean, med) if (metric != "mape" or want_mape) else math.nan
            j += 1
        pooled["rmse"].append(math.sqrt(float(np.mean(sq))))
        pooled["mae"].append(float(np.mean(ab)))
        if want_mape:
            pooled["mape"].append(100.0 * float(np.mean(pc)))
    summary = {k: (float(np.mean(v)) if v else None) for k, v in pooled.items()}
    value = summary[metric]
    if value is None or not math.isfinite(value):
        raise CandidateFailure(f"the {metric} is not defined for this response")
    # SE over the R*K fold values, divided by sqrt(K): repeats do not add independent
    # information (Bengio & Grandvalet 2004: no unbiased estimator exists; this one is naive).
    se = float(np.std(fold_vals, ddof=1) / math.sqrt(plan.folds)) if fold_vals.size > 1 else 0.0
    if not all(math.isfinite(v) for v in fold_vals):
        raise CandidateFailure("a fold error is not finite")
    return CVResult(metric, value, se, fold_vals, summary, lambdas or None)
