"""LOWESS (Cleveland 1979) with every local fit of a pass computed at once.

The plotted smoothers follow statsmodels' ``lowess`` exactly (its rules for the
neighbourhood, the tricube weights, the local linear fit, the ``delta`` skipping with linear
interpolation in between, tied x values sharing one fit and the bisquare robustness weights
from six times the median absolute residual).  statsmodels runs one local fit at a time
with a few numpy calls each; on the few hundred rows of a typical panel those calls, not the
arithmetic, are the cost.  Which points are fitted, their neighbourhoods and the
interpolation weights depend on x alone, so they are worked out once; each pass is then a
handful of array operations over (fitted points x neighbourhood) blocks.  The sums of a
local fit run in row order, as statsmodels' loops do, and the weights' total pairwise, as
its ``np.sum`` does, so the curves are statsmodels' to rounding (bit for bit on x86-64;
``tests/core/test_lowess.py`` compares them).  With long neighbourhoods
(:data:`MAX_NEIGHBOURS`, about 1,200 rows at frac 2/3) the blocks cost as much as
statsmodels' loops, and statsmodels' ``lowess`` itself is called.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from statsmodels.nonparametric.smoothers_lowess import lowess as sm_lowess

from ._types import FloatArray

#: neighbourhoods longer than this (about 1,200 rows at the plots' frac of 2/3) go to
#: statsmodels' own loops, which are as fast there
MAX_NEIGHBOURS = 800
#: and so do more fitted points x neighbourhood cells than this (delta 0 on many rows)
MAX_CELLS = 400_000


@dataclass(frozen=True)
class _Plan:
    """What depends on the sorted x alone: the fitted points, their neighbourhoods (each
    a column of k rows), their tricube weights, and how every other point is filled."""

    fit: np.ndarray  # indices of the points fitted by a local regression
    x0: FloatArray  # x at those points
    idx: np.ndarray  # (k, fits): the row indices of each fitted point's neighbourhood
    xw: FloatArray  # x over ``idx``
    yw: FloatArray  # y over ``idx``
    tricube: FloatArray  # the distance weights over ``idx``
    lo: np.ndarray  # per point: the fitted point it is taken or interpolated from
    a: FloatArray  # per interpolated point: the weight of the next fitted point
    between: np.ndarray  # the interpolated points


def _next_fit(x: FloatArray, delta: float) -> tuple[np.ndarray, np.ndarray]:
    """For every i: the last index tied with x[i], and the next point statsmodels fits
    after fitting i (the last point within delta of x[i], at least one past the ties)."""
    n = x.size
    tie_end = np.searchsorted(x, x, side="right") - 1
    beyond = np.minimum(np.searchsorted(x, x + delta, side="right"), n - 1)
    return tie_end, np.maximum(beyond - 1, tie_end + 1)


def _fitted_points(x: FloatArray, delta: float) -> tuple[np.ndarray, np.ndarray]:
    """The indices statsmodels fits by a local regression, and every point's last tie."""
    tie_end, nxt = _next_fit(x, delta)
    ends, steps = tie_end.tolist(), nxt.tolist()
    fit = [0]
    while ends[fit[-1]] < x.size - 1:
        fit.append(steps[fit[-1]])
    return np.asarray(fit, dtype=np.intp), tie_end


def _plan(x: FloatArray, y: FloatArray, k: int, at: np.ndarray, tie_end: np.ndarray) -> _Plan:
    n = x.size
    # per point, the last fitted point at or before it: ties take its value, the points
    # after its ties are interpolated towards the next fitted point
    lo = np.searchsorted(at, np.arange(n), side="right") - 1
    between = np.flatnonzero(np.arange(n) > tie_end[at[lo]])
    base = x[at[lo[between]]]
    a = (x[between] - base) / (x[at[lo[between] + 1]] - base)
    # the neighbourhood of x0 starts at the first L whose midpoint (x[L] + x[L+k]) / 2 is
    # not below x0 (statsmodels moves a window of k points right while x0 lies beyond it)
    x0 = x[at]
    left = np.searchsorted((x[: n - k] + x[k:]) / 2.0, x0, side="left")
    radius = np.maximum(x0 - x[left], x[left + k - 1] - x0)
    idx = left + np.arange(k)[:, None]
    xw = x[idx]
    d = np.abs(xw - x0) / radius
    t = d * d * d
    t = 1.0 - t
    return _Plan(at, x0, idx, xw, y[idx], t * t * t, lo, a, between)


def _pass(y: FloatArray, rw: FloatArray, plan: _Plan) -> FloatArray:
    """One pass: every local fit with robustness weights ``rw``, then the points between.
    Sums over a neighbourhood run down its column in row order (statsmodels' loops), the
    weights' total pairwise along a contiguous row (its ``np.sum``)."""
    w = plan.tricube * rw[plan.idx]
    total = np.sum(np.ascontiguousarray(w.T), axis=1)
    ok = np.count_nonzero(w > 1e-12, axis=0) >= 2
    w /= total
    xw = plan.xw
    mean = np.sum(w * xw, axis=0)
    dev = xw - mean
    spread = np.maximum(np.sum(w * dev**2, axis=0), 1e-12)
    p = w * (1.0 + (plan.x0 - mean) * dev / spread)
    at_fit = np.where(ok, np.sum(p * plan.yw, axis=0), y[plan.fit])
    out: FloatArray = at_fit[plan.lo]
    a, lo = plan.a, plan.lo[plan.between]
    out[plan.between] = a * at_fit[lo + 1] + (1.0 - a) * out[plan.between]
    return out


def _robustness(y: FloatArray, fitted: FloatArray) -> FloatArray:
    """Bisquare weights of the residuals in units of six median absolute residuals."""
    r = np.abs(y - fitted)
    median = float(np.median(r))
    r = (r > 0).astype(float) if median == 0 else r / (6.0 * median)
    r = np.minimum(r, 1.0)
    t = 1.0 - r * r
    out: FloatArray = t * t
    return out


def lowess(
    y: FloatArray, x: FloatArray, frac: float = 2.0 / 3.0, it: int = 3, delta: float = 0.0
) -> FloatArray:
    """LOWESS of ``y`` on ``x`` (finite, equal lengths): an (n, 2) array of the sorted x
    and the smoothed y, as statsmodels' ``lowess(y, x, frac, it, delta)`` returns it.

    ``frac`` is the share of rows in each neighbourhood, ``it`` the robustness passes after
    the first fit, ``delta`` the distance within which points are interpolated instead of
    fitted."""
    if not 0.0 <= frac <= 1.0:
        raise ValueError(f"frac must be in [0, 1]; got {frac}")
    x = np.asarray(x, dtype=float)
    y = np.asarray(y, dtype=float)
    if x.ndim != 1 or x.shape != y.shape:
        raise ValueError("x and y must be vectors of one length")
    if not (np.all(np.isfinite(x)) and np.all(np.isfinite(y))):
        raise ValueError("x and y must be finite")
    if not delta >= 0.0:
        raise ValueError(f"delta must be at least 0; got {delta}")
    n = x.size
    if n == 0:
        return np.empty((0, 2))
    k = min(max(int(frac * n + 1e-10), 2), n)
    if k <= MAX_NEIGHBOURS:
        order = np.argsort(x)  # statsmodels' own sort, so tied rows sit in the same order
        xs, ys = np.ascontiguousarray(x[order]), np.ascontiguousarray(y[order])
        at, tie_end = _fitted_points(xs, float(delta))
        if at.size * k <= MAX_CELLS:
            return _blocks(xs, ys, k, it, at, tie_end)
    with np.errstate(all="ignore"):  # statsmodels' own 0/0 on heavily tied x
        out: FloatArray = sm_lowess(y, x, frac=frac, it=it, delta=delta)
    return out


def _blocks(
    x: FloatArray, y: FloatArray, k: int, it: int, at: np.ndarray, tie_end: np.ndarray
) -> FloatArray:
    """The passes on sorted x and y, each local fit of a pass in one block."""
    n = x.size
    rw = np.ones(n)
    fitted = rw
    with np.errstate(all="ignore"):  # heavily tied x: 0/0 in a local fit, as in statsmodels
        plan = _plan(x, y, k, at, tie_end)
        for p in range(it + 1):
            fitted = _pass(y, rw, plan)
            if p < it:
                rw = _robustness(y, fitted)
    return np.column_stack([x, fitted])
