"""Back to the original scale: the naive inverse (a median) and Duan's smearing mean.

Duan (1983) "Smearing estimate: a nonparametric retransformation method",
JASA 78:605-610: E[y | x0] ~ (1/n) sum_i g^-1(x0'b + e_i) over the fitted
residuals.  Closed forms are used where they exist (identity, log, square
root).  Power-form inverses (square, reciprocal, power, Box-Cox) and the two
power-form branches of Yeo-Johnson are summed by binomial series over nested
bins of the sorted residuals, exactly next to a pole, clip or branch point, with
a stated bound (:mod:`._smear_tree`: relative error <= 1e-12 plus rounding; for
Yeo-Johnson <= 1e-12 of mean(1 + |y_i|)); a handful of etas take the exact sum.
"""

from __future__ import annotations

import numpy as np

from . import _smear_tree as _tree
from ._types import FloatArray
from .transforms import Transform

_CHUNK = 2_000_000


def naive(t: Transform, eta: np.ndarray) -> np.ndarray:
    """g^-1(eta): the conditional median when z-scale errors are symmetric."""
    return t.inverse(eta)


def _exact(t: Transform, eta: np.ndarray, e: np.ndarray) -> np.ndarray:
    out = np.empty(eta.size)
    step = max(1, _CHUNK // max(e.size, 1))
    for s in range(0, eta.size, step):
        block = t.inverse(eta[s : s + step, None] + e[None, :])
        tot = block.sum(axis=1)
        bad = np.isnan(tot)
        if np.any(bad):  # leave undefined terms out of those rows' means
            sub = block[bad]
            cnt = np.sum(~np.isnan(sub), axis=1)
            with np.errstate(invalid="ignore"):
                tot[bad] = np.where(cnt > 0, np.nansum(sub, axis=1) / np.maximum(cnt, 1), np.nan)
            tot[~bad] /= e.size
        else:
            tot /= e.size
        out[s : s + step] = tot
    return out


def closed_form(t: Transform) -> str | None:
    """'identity', 'log' (also Box-Cox at lambda 0) or 'sqrt' where the smeared mean has a
    closed form; None for the other families."""
    if t.name in ("identity", "sqrt"):
        return t.name
    if t.name == "log" or (t.name == "box_cox" and t.lam is not None and abs(t.lam) < 1e-12):
        return "log"
    return None


def log_shift(t: Transform) -> float:
    """The shift a log-form scale adds before the log (0 for Box-Cox at lambda 0)."""
    return (t.shift or 0.0) if t.name == "log" else 0.0


def log_smear_factor(e: np.ndarray) -> np.ndarray:
    """mean(exp(e)) along the first axis, without overflow for large residuals: the factor
    of exp(eta) in the log scale's smeared mean (one per column of a 2-D ``e``)."""
    top = np.max(e, axis=0)
    if np.all(top < _EXP_SAFE):  # no term overflows, nor their sum: no shift needed
        safe: np.ndarray = np.mean(np.exp(e), axis=0)
        return safe
    out: np.ndarray = np.mean(np.exp(e - top), axis=0) * np.exp(top)
    return out


#: exp(e) of residuals below this is at most 1e304, and a mean of such terms stays finite
_EXP_SAFE = 700.0


def smeared_mean(t: Transform, eta: np.ndarray, resid: np.ndarray) -> np.ndarray:
    """Duan's smearing estimate of E[y | eta] for each eta (m,), residuals (n,).

    Terms whose inverse is undefined (y unbounded) are left out of the average
    (design choice; see METHODS); ``nan`` only if every term is undefined.
    """
    eta = np.asarray(eta, dtype=float)
    e = np.asarray(resid, dtype=float)
    kind = closed_form(t)
    if kind == "identity":
        return eta + float(np.mean(e))
    if kind == "log":
        with np.errstate(over="ignore"):
            out = np.exp(eta) * float(log_smear_factor(e)) - log_shift(t)
        return np.where(np.isfinite(out), out, np.nan)
    if kind == "sqrt":
        return smear_sqrt(eta, e)
    form = _tree.power_form(t)
    if form is not None:
        return _smear_power(eta, e, form)
    if t.name == "yeo_johnson" and t.lam is not None and eta.size >= BINNED_MIN_ETAS:
        out = _tree.smear_yeo_johnson(eta, e, float(t.lam))
        return np.where(np.isfinite(out), out, np.nan)
    return _exact(t, eta, e)


BINNED_MIN_ETAS = _tree.BINNED_MIN_ETAS  # below this many etas the exact sum is cheaper


def _smear_power(
    eta: np.ndarray, e: np.ndarray, form: tuple[float, float, float, float, bool]
) -> np.ndarray:
    """Power-form inverses (square, reciprocal, power, Box-Cox): :func:`smeared_means` for
    one group (``_tree.smear_power_many``: the root series where its bound allows, the
    other etas exactly or by the binned series).  Relative error at most
    ``_tree.TREE_RTOL`` / ``_tree.BIN_RTOL`` (both 1e-12) plus rounding."""
    beta, gamma, delta, p, zero = form
    out = _tree.smear_power_many(
        eta[None, :],
        e[None, :],
        np.array([beta]),
        np.array([gamma]),
        np.array([delta]),
        np.array([p]),
        np.array([zero]),
    )[0]
    return np.where(np.isfinite(out), out, np.nan)


def smeared_means(ts: list[Transform], eta: np.ndarray, e: np.ndarray) -> np.ndarray:
    """:func:`smeared_mean` of G groups at once: row g of ``eta`` (G, m) smeared over row g
    of ``e`` (G, n) on scale ``ts[g]``, the same sums as one call per group.  Closed forms
    and power forms are each done for all their groups together (power forms by
    ``_tree.smear_power_many``); any other scale one group at a time."""
    eta = np.asarray(eta, dtype=float)
    e = np.asarray(e, dtype=float)
    out = np.full(eta.shape, np.nan)
    kinds: dict[str, list[int]] = {}
    forms: list[tuple[float, float, float, float, bool]] = []
    for g, t in enumerate(ts):
        kind = closed_form(t)
        if kind is None:
            form = _tree.power_form(t)
            if form is not None:
                forms.append(form)
                kind = "power"
            else:
                kind = "other"
        kinds.setdefault(kind, []).append(g)
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        for kind, idx in kinds.items():
            gs = np.asarray(idx, dtype=np.intp)
            if kind == "identity":
                out[gs] = eta[gs] + e[gs].mean(axis=1)[:, None]
            elif kind == "log":
                shift = np.array([log_shift(ts[g]) for g in idx])
                fac = log_smear_factor(e[gs].T)
                v = np.exp(eta[gs]) * fac[:, None] - shift[:, None]
                out[gs] = np.where(np.isfinite(v), v, np.nan)
            elif kind == "sqrt":
                out[gs] = smear_sqrt(eta[gs].T, e[gs].T).T
            elif kind == "power":
                f = np.array(forms, dtype=float)
                v = _tree.smear_power_many(
                    eta[gs], e[gs], f[:, 0], f[:, 1], f[:, 2], f[:, 3], f[:, 4] > 0
                )
                out[gs] = np.where(np.isfinite(v), v, np.nan)
            else:
                for g in idx:
                    out[g] = smeared_mean(ts[g], eta[g], e[g])
    return out


def smear_sqrt(eta: FloatArray, e: FloatArray) -> FloatArray:
    """mean_i max(eta + e_i, 0)^2 exactly, for one candidate or many at once: ``eta`` (m,)
    with residuals ``e`` (n,), or ``eta`` (m, C) with ``e`` (n, C), column j of ``eta`` smeared
    over column j of ``e``.

    Where no term is cut off at zero (eta + min e > 0) the square expands:
    eta^2 + 2 eta mean(e) + mean(e^2).  Elsewhere the terms with e_i > -eta are summed from
    sorted residuals and suffix sums: every column that needs it sorted in one call, and the
    number of terms cut off found for every such entry at once by a bisection over the sorted
    rows (the count ``numpy.searchsorted(..., side="right")`` gives, exactly).
    """
    one = e.ndim == 1
    E = e[:, None] if one else e
    H = eta[:, None] if one else eta
    n = E.shape[0]
    out: FloatArray = H * H + 2.0 * H * E.mean(axis=0) + np.einsum("ij,ij->j", E, E) / n
    cut = ~(H + E.min(axis=0) > 0)  # entries with a term cut off at zero
    cols = np.flatnonzero(cut.any(axis=0))
    if cols.size:
        # each such column's residuals sorted (columns, n), and their suffix sums
        es = np.sort((E if cols.size == E.shape[1] else E[:, cols]).T, axis=1)
        s1 = np.cumsum(es[:, ::-1], axis=1)[:, ::-1]  # s1[:, j] = sum of es[:, j:]
        sq = np.square(es)
        s2 = np.cumsum(sq[:, ::-1], axis=1)[:, ::-1]
        rows, at = np.nonzero(cut[:, cols])  # entries (row, position in cols)
        x = H[rows, cols[at]]
        k = _count_at_most(es, at, -x)  # terms with e_i <= -eta are cut off
        kk = np.minimum(k, n - 1)
        keep = k < n  # all n terms cut off: the mean is 0
        out[rows, cols[at]] = np.where(
            keep, ((n - k) * x * x + 2.0 * x * s1[at, kk] + s2[at, kk]) / n, 0.0
        )
    return out[:, 0] if one else out


def _count_at_most(rows_sorted: FloatArray, row: np.ndarray, q: FloatArray) -> np.ndarray:
    """For every query q[i]: how many values of the sorted row ``rows_sorted[row[i]]`` are
    <= q[i] (``searchsorted(side="right")`` of each row), by one bisection for all queries."""
    n = rows_sorted.shape[1]
    lo = np.zeros(q.size, dtype=np.intp)
    hi = np.full(q.size, n, dtype=np.intp)
    for _ in range(max(1, int(n).bit_length())):  # ceil(log2(n + 1)) halvings suffice
        active = lo < hi  # the count lies in [lo, hi]
        mid = (lo + hi) // 2
        at_most = rows_sorted[row, np.minimum(mid, n - 1)] <= q
        lo = np.where(active & at_most, mid + 1, lo)
        hi = np.where(active & ~at_most, mid, hi)
    return lo
