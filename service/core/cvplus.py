"""CV+ prediction intervals from the out-of-fold residuals of the search's folds.

Barber, Candes, Ramdas & Tibshirani (2021), "Predictive inference with the
jackknife+", Annals of Statistics 49(1):486-507, section 4 (CV+).  With K folds,
b_k the fit on all rows outside fold k and R_i = |z(y_i) - x_i'b_{k(i)}| the
model-scale residual of row i under the fit that did not see it, the interval for a
new row x is

    [ q-_alpha{ x'b_{k(i)} - R_i },  q+_alpha{ x'b_{k(i)} + R_i } ]   over i = 1..n,

with q+ the ceil((1 - alpha)(n + 1))-th smallest value and q- the
floor(alpha (n + 1))-th smallest (infinite when that rank is outside 1..n).  For
exchangeable rows its coverage is at least 1 - 2 alpha - min{2(1 - 1/K)/(n/K + 1),
(1 - K/n)/(K + 1)} (their Theorem 4), whatever the error distribution; in practice close
to 1 - alpha.  It is marginal coverage over rows, not coverage at every x.

Scales.  The interval is built on the model scale and each end is mapped through the
inverse of the response transform; the inverse is monotone, so it commutes with the
order statistics and the original-scale interval has the same coverage.  When the
response scale was estimated inside every training fold (a Box-Cox / Yeo-Johnson lambda,
the shift of a log when the response has zeros) fold k has its own scale z_k and R_i is
measured on z_{k(i)}; the candidates x'b_k -/+ R_i are then mapped through the inverse of
their own fold's scale before the order statistics are taken, which is the same
construction for the algorithm "estimate the scale, then fit", and keeps the guarantee.

Stored size.  The artifact keeps every row's fold and |R_i| up to MAX_ROWS rows; above
that, per fold, evenly spaced order statistics of that fold's |R_i|, as many as the
fold's share of MAX_ROWS (a deterministic thinning that keeps each fold's residual
distribution), and n in the ranks is then the number kept.  With repeated K-fold only the
first repeat is used (CV+ is defined on one partition).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np

from . import transforms as tr
from .fastcv import OutOfFold

MAX_ROWS = 2000
CHUNK_CELLS = 4_000_000  # new rows x stored residuals handled at once (32 MB of float64)
AGREEMENT_RTOL = 1e-6  # stored fold fits must reproduce the out-of-fold residuals

REASON_ASKED = "asked for in the request"


def thinned(oof: OutOfFold, max_rows: int = MAX_ROWS) -> tuple[str, np.ndarray, np.ndarray]:
    """(kind, fold ids, |residuals|) to store: every row, or per-fold order statistics."""
    fold = np.asarray(oof.fold, dtype=np.int64)
    a = np.abs(np.asarray(oof.residual, dtype=float))
    n = a.size
    if n <= max_rows:
        return "all", fold, a
    K = int(fold.max()) + 1
    sizes = np.bincount(fold, minlength=K)
    # largest-remainder shares of max_rows, at least one per non-empty fold
    raw = sizes * max_rows / n
    share = np.floor(raw).astype(np.int64)
    share[(sizes > 0) & (share == 0)] = 1
    left = max_rows - int(share.sum())
    for k in np.argsort(-(raw - np.floor(raw)), kind="stable")[: max(left, 0)]:
        share[k] += 1
    folds_out, vals_out = [], []
    for k in range(K):
        if sizes[k] == 0:
            continue
        s = np.sort(a[fold == k])
        m = int(share[k])
        pos = (np.arange(m) + 0.5) * s.size / m - 0.5
        vals_out.append(np.interp(pos, np.arange(s.size), s))
        folds_out.append(np.full(m, k, dtype=np.int64))
    return "quantiles", np.concatenate(folds_out), np.concatenate(vals_out)


POWERS_PER_FOLD = (
    "the entry's predictor powers were estimated inside every fold, and CV+ fits are "
    "stored only for predictor scales fixed across folds"
)
NOT_KEPT = "the out-of-fold fits were not kept for this entry"


def stored_block(
    oof: OutOfFold | None, X: np.ndarray, y: np.ndarray, scheme: str, why_none: str = NOT_KEPT
) -> dict[str, Any]:
    """The artifact's ``cv_plus`` block: fold fits and residuals, or why there are none
    (``why_none`` when ``oof`` is None).

    ``X``: (n, p) the entry's full design; ``y``: (n,) original response.  The stored fold
    fits are checked to reproduce the out-of-fold residuals on ``X`` before they are kept.
    """
    if oof is None:
        return {"available": False, "reason": why_none}
    K = oof.coefficients.shape[0]
    with np.errstate(all="ignore"):
        eta = np.einsum("ij,ij->i", X, oof.coefficients[oof.fold])
        z = np.empty_like(eta)
        for k in range(K):
            rows = oof.fold == k
            z[rows] = oof.transforms[k].forward(y[rows])
        again = z - eta
    scale = float(np.max(np.abs(z))) if z.size else 1.0
    if not (
        np.all(np.isfinite(oof.residual))
        and np.all(np.isfinite(oof.coefficients))
        and np.allclose(again, oof.residual, rtol=AGREEMENT_RTOL, atol=AGREEMENT_RTOL * scale)
    ):
        return {
            "available": False,
            "reason": "the out-of-fold residuals are not finite on the model scale",
        }
    kind, fold, values = thinned(oof)
    return {
        "available": True,
        "folds": K,
        "scheme": scheme,
        "rows": int(oof.fold.size),
        "fold_fits": [
            {
                "response_transform": oof.transforms[k].to_dict(),
                "coefficients": [float(v) for v in oof.coefficients[k]],
            }
            for k in range(K)
        ],
        "residuals": {
            "kind": kind,
            "fold": [int(v) for v in fold],
            "values": [float(v) for v in values],
        },
    }


def default_method(failed: list[str] | None, available: bool, why_not: str) -> tuple[str, str]:
    """(interval method, clause) when the caller does not choose: CV+ when normality fails
    on the entry and its artifact holds what CV+ needs, otherwise normal theory."""
    if failed is None:
        return "normal", "the model does not record its condition results, so normal theory"
    if "normality" not in failed:
        return "normal", "normality of the residuals is not rejected on this entry"
    if not available:
        return "normal", f"normality fails on this entry, but CV+ is not available ({why_not})"
    return "cv_plus", "normality fails on this entry, so CV+ from its out-of-fold residuals"


def ranks(n: int, level: float) -> tuple[int, int]:
    """1-based ranks (lower, upper) of the CV+ order statistics among n values; a rank
    outside 1..n means that end is infinite.  alpha = 1 - level."""
    alpha = 1.0 - level
    k_hi = math.ceil((1.0 - alpha) * (n + 1) - 1e-9)
    return n + 1 - k_hi, k_hi


def _kth(v: np.ndarray, k: int) -> np.ndarray:
    """k-th smallest (1-based) along axis 1; -inf / +inf when k is below 1 / above n."""
    n = v.shape[1]
    if k < 1:
        return np.full(v.shape[0], -np.inf)
    if k > n:
        return np.full(v.shape[0], np.inf)
    return np.partition(v, k - 1, axis=1)[:, k - 1]


BISECTIONS = 80  # halvings at most; a row stops when its bracket holds one candidate


def _kth_shifted(mu: np.ndarray, sorted_r: list[np.ndarray], k: int, sign: int) -> np.ndarray:
    """k-th smallest (1-based) of {mu[:, f] + sign * R : R in sorted_r[f]} for every row of
    ``mu`` (c, K), without forming the c x n candidates: bisection on the value with counts
    from the sorted residuals of each fold (O(K log n) per step), then the candidate at
    the found value.  Equal to a full sort up to rounding in the last place."""
    n = sum(r.size for r in sorted_r)
    c = mu.shape[0]
    if k < 1:
        return np.full(c, -np.inf)
    if k > n:
        return np.full(c, np.inf)
    rmax = max(float(r[-1]) for r in sorted_r if r.size)
    rmin = min(float(r[0]) for r in sorted_r if r.size)
    lo_c = np.min(mu, axis=1) + (-rmax if sign < 0 else rmin)
    hi_c = np.max(mu, axis=1) + (-rmin if sign < 0 else rmax)
    a = lo_c - (np.abs(lo_c) + 1.0) * 1e-6  # below every candidate: count(a) < k
    b = hi_c + (np.abs(hi_c) + 1.0) * 1e-6  # above every candidate: count(b) = n >= k

    def count(rows: np.ndarray, v: np.ndarray) -> np.ndarray:
        total = np.zeros(rows.size, dtype=np.int64)
        for f, r in enumerate(sorted_r):
            m = mu[rows, f]
            if sign < 0:  # mu - R <= v  <=>  R >= mu - v
                total += r.size - np.searchsorted(r, m - v, side="left")
            else:  # mu + R <= v  <=>  R <= v - mu
                total += np.searchsorted(r, v - m, side="right")
        return total

    # bracket (a, b] with count(a) < k <= count(b); a row is done once its bracket holds
    # exactly one candidate (count(b) - count(a) == 1) or is one float wide
    ca = np.zeros(c, dtype=np.int64)
    cb = np.full(c, n, dtype=np.int64)
    active = np.arange(c)
    for _ in range(BISECTIONS):
        mid = a[active] + (b[active] - a[active]) / 2.0
        open_ = (cb[active] - ca[active] > 1) & (mid > a[active]) & (mid < b[active])
        active, mid = active[open_], mid[open_]
        if not active.size:
            break
        cm = count(active, mid)
        enough = cm >= k
        up, down = active[enough], active[~enough]
        b[up], cb[up] = mid[enough], cm[enough]
        a[down], ca[down] = mid[~enough], cm[~enough]
    # the largest candidate not above b is the k-th smallest
    best = np.full(c, -np.inf)
    for f, r in enumerate(sorted_r):
        if not r.size:
            continue
        if sign < 0:
            j = np.searchsorted(r, mu[:, f] - b, side="left")
            ok = j < r.size
            cand = mu[:, f] - r[np.minimum(j, r.size - 1)]
        else:
            j = np.searchsorted(r, b - mu[:, f], side="right") - 1
            ok = j >= 0
            cand = mu[:, f] + r[np.maximum(j, 0)]
        best = np.where(ok & (cand > best), cand, best)
    return best


def intervals(
    coefficients: np.ndarray,
    transforms: list[tr.Transform],
    fold: np.ndarray,
    abs_resid: np.ndarray,
    X0: np.ndarray,
    level: float,
    model_transform: tr.Transform,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """CV+ limits for the rows of ``X0`` (m, p): (lower, upper) on the original scale and
    the same two on the scale of ``model_transform`` (the entry's own model scale).

    ``coefficients``: (K, p) fold fits; ``transforms``: the K folds' response scales;
    ``fold``: (n,) fold ids; ``abs_resid``: (n,) |R_i|.  An end that is infinite (its
    rank is outside 1..n) or undefined (beyond the range of an inverse) is NaN or +/-inf;
    the caller reports it as null.
    """
    m = X0.shape[0]
    n = abs_resid.size
    k_lo, k_hi = ranks(n, level)
    shared = all(t == model_transform for t in transforms)
    lo_y, hi_y = np.empty(m), np.empty(m)
    lo_z, hi_z = np.empty(m), np.empty(m)
    step = max(1, CHUNK_CELLS // max(n, 1))
    groups = [np.flatnonzero(fold == k) for k in range(len(transforms))]
    sorted_r = [np.sort(abs_resid[g]) for g in groups]
    if shared:
        step = max(1, CHUNK_CELLS // 64)  # no c x n matrix on this path
    t0 = model_transform
    with np.errstate(all="ignore"):
        for a in range(0, m, step):
            b = min(m, a + step)
            mu = X0[a:b] @ coefficients.T  # (c, K)
            if shared:
                zl = _kth_shifted(mu, sorted_r, k_lo, -1)
                zh = _kth_shifted(mu, sorted_r, k_hi, +1)
                lo_z[a:b], hi_z[a:b] = zl, zh
                yl = np.where(np.isfinite(zl), t0.inverse(zl), np.nan)
                yh = np.where(np.isfinite(zh), t0.inverse(zh), np.nan)
                if not t0.increasing:
                    yl, yh = yh, yl
                lo_y[a:b], hi_y[a:b] = yl, yh
                continue
            # one scale per fold: map every candidate through its own fold's inverse
            centre = mu[:, fold]
            lows, highs = centre - abs_resid, centre + abs_resid
            yl_all, yh_all = np.empty_like(lows), np.empty_like(highs)
            for k, cols in enumerate(groups):
                tk = transforms[k]
                u, v = tk.inverse(lows[:, cols]), tk.inverse(highs[:, cols])
                if not tk.increasing:
                    u, v = v, u
                yl_all[:, cols], yh_all[:, cols] = u, v
            yl = _kth(np.where(np.isnan(yl_all), -np.inf, yl_all), k_lo)
            yh = _kth(np.where(np.isnan(yh_all), np.inf, yh_all), k_hi)
            lo_y[a:b], hi_y[a:b] = yl, yh
            zl, zh = t0.forward(yl), t0.forward(yh)
            if not t0.increasing:
                zl, zh = zh, zl
            lo_z[a:b], hi_z[a:b] = zl, zh
    return lo_y, hi_y, lo_z, hi_z
