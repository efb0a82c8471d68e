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

Predictor powers.  When predictor powers were estimated inside every training fold
(Box-Tidwell, :mod:`boxtidwell`), fold k's design holds w(x; a_k), its own powers, in
those columns (the Box-Cox form (x^a - 1)/a with an intercept, x^a without), and b_k
belongs to that design.  The artifact stores every fold's powers (``fold_powers``), and a
new row's x'b_k is computed on fold k's own design: the fitted algorithm is "estimate the
powers, then fit", and CV+ applies to it unchanged.

Stored size.  The artifact keeps every row's fold and |R_i| up to MAX_ROWS rows; above
that, per fold, evenly spaced order statistics of that fold's |R_i|, as many as the
fold's share of MAX_ROWS (a deterministic thinning that keeps each fold's residual
distribution), and n in the ranks is then the number kept.  With repeated K-fold only the
first repeat is used (CV+ is defined on one partition).
"""

from __future__ import annotations

import functools
import math
from collections.abc import Sequence
from dataclasses import dataclass
from enum import StrEnum

import numpy as np

from . import transforms as tr
from .boxtidwell import POWER_BOUNDS, power_columns
from .cvresult import OutOfFold

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


NOT_KEPT = "the out-of-fold fits were not kept for this entry"
POWER_FORMS = ("box_cox", "plain")  # w(x; a) = (x^a - 1)/a (log x at 0), or x^a
MAX_ABS_POWER = max(abs(b) for b in POWER_BOUNDS)  # a fold's estimate stays within


@dataclass(frozen=True)
class FoldPowers:
    """Predictor powers estimated inside every training fold: fold k's design holds
    w(x_j; powers[k, j]) at design column ``positions[j]`` (predictor ``columns[j]``)."""

    columns: tuple[str, ...]
    positions: tuple[int, ...]
    powers: np.ndarray  # (K, j)
    boxcox_form: bool

    def fold_means(self, X: np.ndarray, coefficients: np.ndarray, x: np.ndarray) -> np.ndarray:
        """(m, K) x_i'b_k on every fold's own design.  ``X``: (m, p) the entry's design
        (its columns at ``positions`` are replaced); ``x``: (m, j) the raw predictor values
        of ``columns``.  A value a fold's power cannot take (x = 0 with a power <= 0) gives
        a non-finite mean."""
        pos = list(self.positions)
        fixed = X.copy()
        fixed[:, pos] = 0.0
        with np.errstate(all="ignore"):
            mu: np.ndarray = fixed @ coefficients.T
            logx = np.log(x)
            for k in range(coefficients.shape[0]):
                W, _ = power_columns(logx, self.powers[k], self.boxcox_form)
                mu[:, k] += W @ coefficients[k, pos]
        return mu

    def undefined_rows(self, x: np.ndarray) -> np.ndarray:
        """(m,) rows where some fold's power column is not finite (x = 0, power <= 0)."""
        bad = np.zeros(x.shape[0], dtype=bool)
        with np.errstate(all="ignore"):
            logx = np.log(x)
            for a in self.powers:
                W, _ = power_columns(logx, a, self.boxcox_form)
                bad |= ~np.all(np.isfinite(W), axis=1)
        return bad


def fold_powers_of(oof: OutOfFold) -> FoldPowers | None:
    """The fold powers ``oof`` carries, or None when its predictor scales are fixed."""
    if oof.dynamic is None or oof.powers is None:
        return None
    d = oof.dynamic
    return FoldPowers(tuple(d.columns), tuple(d.positions), oof.powers, d.boxcox_form)


@dataclass(frozen=True, eq=False)
class StoredFits:
    """What CV+ needs of an entry: fold k's fit ``coefficients[k]`` on the scale
    ``transforms[k]``, and the stored out-of-fold residuals (``fold`` ids and
    ``abs_resid``, every row or per-fold quantiles: ``kind`` "all" or "quantiles") of
    ``rows`` training rows split by ``scheme``; ``fold_powers``: the predictor powers each
    fold estimated (None when the predictor scales are fixed)."""

    coefficients: np.ndarray  # (K, p)
    transforms: tuple[tr.Transform, ...]
    fold: np.ndarray  # (n,) fold ids of the stored residuals
    abs_resid: np.ndarray  # (n,)
    kind: str
    scheme: str
    rows: int
    fold_powers: FoldPowers | None = None

    available = True
    reason = ""

    @property
    def folds(self) -> int:
        return int(self.coefficients.shape[0])


@dataclass(frozen=True)
class NoStoredFits:
    """Why an entry has no CV+ fits."""

    reason: str
    available = False


def stored_block(
    oof: OutOfFold | None, X: np.ndarray, y: np.ndarray, scheme: str, why_none: str = NOT_KEPT
) -> StoredFits | NoStoredFits:
    """What the model keeps for CV+: fold fits and residuals, or why there are none
    (``why_none`` when ``oof`` is None).

    ``X``: (n, p) the entry's full design; ``y``: (n,) original response.  The stored fold
    fits are checked to reproduce the out-of-fold residuals on ``X`` before they are kept.
    """
    if oof is None:
        return NoStoredFits(why_none)
    K = oof.coefficients.shape[0]
    fp = fold_powers_of(oof)
    with np.errstate(all="ignore"):
        if fp is None:
            eta = np.einsum("ij,ij->i", X, oof.coefficients[oof.fold])
        else:  # each row on the design of the fold that held it out
            assert oof.dynamic is not None  # fold_powers_of found it
            eta = np.empty(X.shape[0])
            for k in range(K):
                rows = np.flatnonzero(oof.fold == k)
                mu = fp.fold_means(X[rows], oof.coefficients, oof.dynamic.x[rows])
                eta[rows] = mu[:, k]
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
        return NoStoredFits("the out-of-fold residuals are not finite on the model scale")
    kind, fold, values = thinned(oof)
    return StoredFits(
        coefficients=np.array(oof.coefficients[:K], dtype=float),
        transforms=tuple(oof.transforms[:K]),
        fold=np.asarray(fold, dtype=np.int64),
        abs_resid=np.asarray(values, dtype=float),
        kind=kind,
        scheme=scheme,
        rows=int(oof.fold.size),
        fold_powers=fp,
    )


class IntervalMethod(StrEnum):
    """The prediction-interval methods: normal theory on the model scale, or CV+ from the
    stored out-of-fold residuals."""

    NORMAL = "normal"
    CV_PLUS = "cv_plus"


def default_method(
    failed: Sequence[str] | None, available: bool, why_not: str
) -> tuple[IntervalMethod, str]:
    """(interval method, clause) when the caller does not choose: CV+ when normality fails
    on the entry and its artifact holds what CV+ needs, otherwise normal theory."""
    normal = IntervalMethod.NORMAL
    if failed is None:
        return normal, "the model does not record its condition results, so normal theory"
    if "normality" not in failed:
        return normal, "normality of the residuals is not rejected on this entry"
    if not available:
        return normal, f"normality fails on this entry, but CV+ is not available ({why_not})"
    return (
        IntervalMethod.CV_PLUS,
        "normality fails on this entry, so CV+ from its out-of-fold residuals",
    )


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
    if not 1 <= k <= n:  # below every candidate, or above every one
        return np.full(c, -np.inf if k < 1 else np.inf)
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


# ----------------------------------------------- one scale per fold, without the matrix
_MAX = float(np.finfo(float).max)
_SIGN_BIT = np.int64(-(2**63))
_LOW_BITS = np.int64(2**63 - 1)


def _keys(v: np.ndarray) -> np.ndarray:
    """int64 keys in the order of the floats ``v`` (adjacent floats: adjacent keys)."""
    i = np.ascontiguousarray(v, dtype=np.float64).view(np.int64)
    return np.where(i >= 0, i, -(i & _LOW_BITS))


def _floats(k: np.ndarray) -> np.ndarray:
    """The floats of :func:`_keys` (``-0.0`` comes back as ``0.0``)."""
    bits = np.where(k >= 0, k, (-k) | _SIGN_BIT)
    return np.ascontiguousarray(bits, dtype=np.int64).view(np.float64)


def _finite_inverse(t: tr.Transform, w: float) -> bool:
    return bool(np.isfinite(t.inverse(np.array([w]))[0]))


def _edge(t: tr.Transform, anchor: float, end: float) -> float:
    """The float nearest ``end`` whose inverse under ``t`` is finite, by bisection over the
    float ordering from ``anchor`` (finite) towards ``end`` (+/- the largest float)."""
    if _finite_inverse(t, end):
        return end
    good, bad = int(_keys(np.array([anchor]))[0]), int(_keys(np.array([end]))[0])
    while abs(bad - good) > 1:
        mid = (good + bad) // 2
        if _finite_inverse(t, float(_floats(np.array([mid], dtype=np.int64))[0])):
            good = mid
        else:
            bad = mid
    return float(_floats(np.array([good], dtype=np.int64))[0])


@functools.lru_cache(maxsize=256)
def defined_interval(t: tr.Transform) -> tuple[float, float, float, float] | None:
    """(A, B, G(A), G(B)) for an increasing scale ``t`` with inverse G: G(w) is finite
    exactly for A <= w <= B; None when ``t`` decreases or G is finite at none of 0, 1, -1.

    Assumes the finite set of G is one interval.  It is for every family: G is undefined
    beyond a pole or a branch limit (Box-Cox and Yeo-Johnson with lambda < 0 above the
    pole, Yeo-Johnson with lambda > 2 below its limit, negative powers at z <= 0) and
    overflows beyond one point (exp above about 709.78); clipped parts (Box-Cox with
    lambda > 0, sqrt, positive powers below 0) are finite."""
    if not t.increasing:
        return None
    anchor = next((w for w in (0.0, 1.0, -1.0) if _finite_inverse(t, w)), None)
    if anchor is None:
        return None
    a, b = _edge(t, anchor, -_MAX), _edge(t, anchor, _MAX)
    ga, gb = t.inverse(np.array([a, b]))
    return a, b, float(ga), float(gb)


def _first_at_least(
    m: np.ndarray, r: np.ndarray, sign: int, bound: float, strict: bool
) -> np.ndarray:
    """Per row i, the smallest j in 0..r.size with w_ij = m[i] + sign * r[j] on the side of
    ``bound`` the order of j reaches last (``sign`` > 0: w_ij >= bound, or > with
    ``strict``; ``sign`` < 0: w_ij <= bound, or <): a vectorised binary search that
    evaluates w_ij exactly as the full sort does."""
    lo = np.zeros(m.size, dtype=np.int64)
    hi = np.full(m.size, r.size, dtype=np.int64)
    rows = np.arange(m.size)
    while rows.size:
        mid = (lo[rows] + hi[rows]) // 2
        w = m[rows] + sign * r[mid]
        if sign > 0:
            ok = w > bound if strict else w >= bound
        else:
            ok = w < bound if strict else w <= bound
        hi[rows[ok]] = mid[ok]
        lo[rows[~ok]] = mid[~ok] + 1
        rows = rows[lo[rows] < hi[rows]]
    return lo


def _kth_mapped(
    mu: np.ndarray,
    sorted_r: list[np.ndarray],
    k: int,
    sign: int,
    transforms: Sequence[tr.Transform],
    bounds: list[tuple[float, float, float, float]],
) -> np.ndarray:
    """k-th smallest (1-based) of {G_f(mu[:, f] + sign * R) : R in sorted_r[f]} per row,
    G_f the inverse of fold f's increasing scale; a candidate where G_f is not finite
    counts as -inf for the lower end (sign < 0) and +inf for the upper end, as in the
    full sort.  No c x n matrix: bisection on the original-scale value v.

    Why the bisection is valid: the k-th smallest is the least v with count(v) >= k,
    count(v) = #{candidates <= v}, so it needs only a count that is non-decreasing in v.
    On fold f's finite part [A_f, B_f] (:func:`defined_interval`) G_f is continuous and
    non-decreasing (strictly, except on a clipped part where it equals its least value
    G_f(A_f)), so {w in [A_f, B_f] : G_f(w) <= v} = {w <= t_f(v)} with t_f(v) = g_f(v),
    the forward map (g_f(G_f(A_f)) is the top of a clipped part), for G_f(A_f) <= v <
    G_f(B_f); no w for v below G_f(A_f), every w from G_f(B_f) on.  The model-scale
    candidates mu -/+ R are monotone in R, so each fold's count is one search in its
    sorted residuals, and the sum over folds is non-decreasing in v.  The candidates
    outside [A_f, B_f] are counted once (exactly, by evaluating mu -/+ R) and add a
    constant.  The found value is the largest counted candidate, evaluated through G_f,
    so it is a candidate itself (equal to the full sort up to rounding in the last place).
    Bisection runs on the order of the floats, so at most 64 halvings reach one float.
    """
    n = sum(r.size for r in sorted_r)
    c = mu.shape[0]
    if not 1 <= k <= n:  # below every candidate, or above every one
        return np.full(c, -np.inf if k < 1 else np.inf)
    K = len(sorted_r)
    below = np.zeros((c, K), dtype=np.int64)  # candidates with w < A_f
    above = np.zeros((c, K), dtype=np.int64)  # candidates with w > B_f
    for f, r in enumerate(sorted_r):
        A, B = bounds[f][0], bounds[f][1]
        m = mu[:, f]
        if sign < 0:  # w_j = m - r_j falls with j
            above[:, f] = _first_at_least(m, r, sign, B, strict=False)
            below[:, f] = r.size - _first_at_least(m, r, sign, A, strict=True)
        else:  # w_j = m + r_j rises with j
            below[:, f] = _first_at_least(m, r, sign, A, strict=False)
            above[:, f] = r.size - _first_at_least(m, r, sign, B, strict=True)
    sizes = np.array([r.size for r in sorted_r], dtype=np.int64)
    defined = np.maximum(sizes[None, :] - below - above, 0)
    undefined = (below + above).sum(axis=1) if sign < 0 else np.zeros(c, dtype=np.int64)

    def per_fold(rows: np.ndarray, v: np.ndarray) -> np.ndarray:
        """(rows, K) defined candidates <= v in each fold."""
        out = np.empty((rows.size, K), dtype=np.int64)
        for f, r in enumerate(sorted_r):
            t = transforms[f]
            _, _, g_lo, g_hi = bounds[f]
            th = np.where(v < g_lo, -np.inf, np.where(v >= g_hi, np.inf, t.forward(v)))
            th = np.where(np.isnan(th), -np.inf, th)
            m = mu[rows, f]
            if sign < 0:  # m - r_j <= th  <=>  r_j >= m - th
                le = r.size - np.searchsorted(r, m - th, side="left")
            else:  # m + r_j <= th  <=>  r_j <= th - m
                le = np.searchsorted(r, th - m, side="right")
            # of those, the defined ones: not below A (all counted first), not above B
            lo, hi = below[rows, f], r.size - above[rows, f]
            out[:, f] = np.clip(le, lo, np.maximum(hi, lo)) - lo
        return out

    def count(rows: np.ndarray, v: np.ndarray) -> np.ndarray:
        total: np.ndarray = per_fold(rows, v).sum(axis=1) + undefined[rows]
        return total

    def value(rows: np.ndarray, f: int, j: np.ndarray) -> np.ndarray:
        w: np.ndarray = mu[rows, f] + sign * sorted_r[f][j]
        return transforms[f].inverse(w)

    result = np.full(c, np.nan)
    if sign < 0:
        result[undefined >= k] = -np.inf  # the k smallest are all -inf
    else:
        result[defined.sum(axis=1) < k] = np.inf  # the k-th is past every finite one
    rows = np.flatnonzero(np.isnan(result))
    # the finite candidates' range: each fold's smallest and largest defined w
    lo_v = np.full(rows.size, np.inf)
    hi_v = np.full(rows.size, -np.inf)
    for f, r in enumerate(sorted_r):
        has = defined[rows, f] > 0
        if not has.any():
            continue
        sub = rows[has]
        if sign < 0:
            j_small, j_big = r.size - below[sub, f] - 1, above[sub, f]
        else:
            j_small, j_big = below[sub, f], r.size - above[sub, f] - 1
        lo_v[has] = np.minimum(lo_v[has], value(sub, f, j_small))
        hi_v[has] = np.maximum(hi_v[has], value(sub, f, j_big))
    a = np.maximum(lo_v - (np.abs(lo_v) + 1.0) * 1e-6, -_MAX)
    b = np.minimum(hi_v + (np.abs(hi_v) + 1.0) * 1e-6, _MAX)
    ca, cb = count(rows, a), count(rows, b)
    wide = (ca >= k) | (cb < k)  # rounding at the ends: the whole float range
    a[wide], b[wide] = -_MAX, _MAX
    if wide.any():
        ca[wide], cb[wide] = count(rows[wide], a[wide]), count(rows[wide], b[wide])
    ka, kb = _keys(a), _keys(b)
    # bracket (a, b] with count(a) < k <= count(b); a row is done once its bracket holds
    # one candidate or two adjacent floats (ties)
    live = np.arange(rows.size)
    for _ in range(BISECTIONS):
        live = live[(cb[live] - ca[live] > 1) & (kb[live] > ka[live] + 1)]  # no overflow
        if not live.size:
            break
        km = (ka[live] >> 1) + (kb[live] >> 1) + (ka[live] & kb[live] & 1)
        cm = count(rows[live], _floats(km))
        enough = cm >= k
        up, down = live[enough], live[~enough]
        kb[up], cb[up] = km[enough], cm[enough]
        ka[down], ca[down] = km[~enough], cm[~enough]
    # the largest counted candidate at b is the k-th smallest
    le = per_fold(rows, _floats(kb))
    best = np.full(rows.size, -np.inf)
    for f, r in enumerate(sorted_r):
        has = le[:, f] > 0
        if not has.any():
            continue
        sub = rows[has]
        # sign < 0: defined j run from above to n - below - 1 with w falling
        j = r.size - below[sub, f] - le[has, f] if sign < 0 else below[sub, f] + le[has, f] - 1
        best[has] = np.fmax(best[has], value(sub, f, j))
    result[rows] = best
    return result


def _kth_matrix(
    mu: np.ndarray,
    fold: np.ndarray,
    abs_resid: np.ndarray,
    groups: list[np.ndarray],
    transforms: Sequence[tr.Transform],
    k_lo: int,
    k_hi: int,
) -> tuple[np.ndarray, np.ndarray]:
    """Both ends by forming every candidate (c x n) and partitioning: each through its own
    fold's inverse, an undefined one counting as beyond every value."""
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
    return yl, yh


def intervals(
    coefficients: np.ndarray,
    transforms: Sequence[tr.Transform],
    fold: np.ndarray,
    abs_resid: np.ndarray,
    X0: np.ndarray,
    level: float,
    model_transform: tr.Transform,
    fold_powers: FoldPowers | None = None,
    x0_powers: np.ndarray | None = None,
    fast: bool = True,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """CV+ limits for the rows of ``X0`` (m, p): (lower, upper) on the original scale and
    the same two on the scale of ``model_transform`` (the entry's own model scale).

    ``coefficients``: (K, p) fold fits; ``transforms``: the K folds' response scales;
    ``fold``: (n,) fold ids; ``abs_resid``: (n,) |R_i|; ``fold_powers`` with ``x0_powers``
    (m, j), the raw values of its columns: fold k's mean is taken on fold k's own design.
    An end that is infinite (its rank is outside 1..n) or undefined (beyond the range of
    an inverse, or a fold's power undefined at the row) is NaN or +/-inf; the caller
    reports it as null.  ``fast=False`` forms every rows x residuals candidate and sorts
    (the reference the order-statistic paths are checked against).
    """
    m = X0.shape[0]
    n = abs_resid.size
    k_lo, k_hi = ranks(n, level)
    K = len(transforms)
    shared = all(t == model_transform for t in transforms)
    groups = [np.flatnonzero(fold == k) for k in range(K)]
    sorted_r = [np.sort(abs_resid[g]) for g in groups]
    bounds: list[tuple[float, float, float, float]] = []
    mode = "matrix"
    if fast and shared:
        mode = "shared"
    elif fast:
        found = [defined_interval(t) for t in transforms]
        if all(b is not None for b in found) and all(g.size for g in groups):
            bounds = [b for b in found if b is not None]
            mode = "mapped"
    lo_y, hi_y = np.empty(m), np.empty(m)
    lo_z, hi_z = np.empty(m), np.empty(m)
    # no c x n matrix on the order-statistic paths
    step = max(1, CHUNK_CELLS // (max(n, 1) if mode == "matrix" else 64))
    t0 = model_transform
    with np.errstate(all="ignore"):
        for a in range(0, m, step):
            b = min(m, a + step)
            if fold_powers is None or x0_powers is None:
                mu = X0[a:b] @ coefficients.T  # (c, K)
            else:
                mu = fold_powers.fold_means(X0[a:b], coefficients, x0_powers[a:b])
            bad = ~np.all(np.isfinite(mu), axis=1)
            mu[bad] = 0.0
            if mode == "shared":
                zl = _kth_shifted(mu, sorted_r, k_lo, -1)
                zh = _kth_shifted(mu, sorted_r, k_hi, +1)
                yl = np.where(np.isfinite(zl), t0.inverse(zl), np.nan)
                yh = np.where(np.isfinite(zh), t0.inverse(zh), np.nan)
                if not t0.increasing:
                    yl, yh = yh, yl
            else:
                if mode == "mapped":  # every fold's scale increases (defined_interval)
                    yl = _kth_mapped(mu, sorted_r, k_lo, -1, transforms, bounds)
                    yh = _kth_mapped(mu, sorted_r, k_hi, +1, transforms, bounds)
                else:
                    yl, yh = _kth_matrix(mu, fold, abs_resid, groups, transforms, k_lo, k_hi)
                zl, zh = t0.forward(yl), t0.forward(yh)
                if not t0.increasing:
                    zl, zh = zh, zl
            for out, v in ((lo_y, yl), (hi_y, yh), (lo_z, zl), (hi_z, zh)):
                out[a:b] = np.where(bad, np.nan, v)
    return lo_y, hi_y, lo_z, hi_z
