"""Back to the original scale: the naive inverse (a median) and Duan's smearing mean.

Duan (1983) "Smearing estimate: a nonparametric retransformation method",
JASA 78:605-610: E[y | x0] ~ (1/n) sum_i g^-1(x0'b + e_i) over the fitted
residuals.  Closed forms are used where they exist (identity, log, square
root).  Power-form inverses (square, reciprocal, power, Box-Cox) are summed by
binomial series over nested bins of the sorted residuals with a stated bound
(relative error <= 1e-12 plus rounding; :mod:`._smear_tree`).  For Yeo-Johnson
the smeared mean S(eta) is a smooth function of eta between singular points: a
Gauss rule of the residual distribution checked against the exact mean, or S
computed exactly (with its slope) at adaptively chosen nodes across the
requested etas and interpolated by piecewise-cubic Hermite polynomials, each
interval checked at its midpoint against the exact value (relative error <=
SMEAR_RTOL) before it is used; what cannot be resolved is computed exactly.
"""

from __future__ import annotations

import numpy as np

from . import _smear_tree as _tree
from ._types import FloatArray
from .transforms import Transform

SMEAR_RTOL = 1e-9
EXACT_LIMIT = 400_000  # m * n below which the exact double sum is cheap enough
_CHUNK = 2_000_000
ADAPTIVE_MIN_ETAS = 2000


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
    out: np.ndarray = np.mean(np.exp(e - top), axis=0) * np.exp(top)
    return out


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
    if eta.size * e.size <= EXACT_LIMIT:
        return _exact(t, eta, e)
    quick = _smear_gauss(t, eta, e)
    if quick is not None:
        return quick
    if eta.size <= ADAPTIVE_MIN_ETAS:  # the adaptive nodes would cost about as much
        return _exact(t, eta, e)
    return _smear_interpolated(t, eta, e)


BINNED_MIN_ETAS = 16  # below this many etas the exact sum costs less than building the bins


def _smear_power(
    eta: np.ndarray, e: np.ndarray, form: tuple[float, float, float, float, bool]
) -> np.ndarray:
    """Power-form inverses (square, reciprocal, power, Box-Cox): the one-block series of all
    residuals where every term is defined and far enough from the singular point
    (``_tree.smear_power_root``), the binned series with exact sums next to the singular
    point elsewhere (``_tree.smear_power_binned``), the exact sum for a handful of etas.
    Relative error at most ``_tree.TREE_RTOL`` / ``_tree.BIN_RTOL`` (both 1e-12) plus
    rounding; see those functions for the bounds."""
    beta, gamma, delta, p, zero = form
    out, done = _tree.smear_power_root(eta, e, beta, gamma, delta, p)
    rest = ~done
    if np.any(rest):
        if int(rest.sum()) >= BINNED_MIN_ETAS:
            out[rest] = _tree.smear_power_binned(eta[rest], e, beta, gamma, delta, p, zero)
        else:
            out[rest] = _tree.exact_power(eta[rest], e, beta, gamma, delta, p, zero)
    return np.where(np.isfinite(out), out, np.nan)


GAUSS_NODES = (16, 32)


def gauss_rule(e: np.ndarray, q: int) -> tuple[np.ndarray, np.ndarray]:
    """Gauss quadrature for the empirical distribution of ``e`` (Golub & Welsch 1969).

    Nodes and weights such that sum_j w_j f(x_j) = mean_i f(e_i) exactly for
    every polynomial f of degree <= 2q - 1.  The Jacobi matrix comes from the
    Lanczos process on diag(e) with full re-orthogonalisation.
    """
    mu = float(np.mean(e))
    sd = float(np.std(e))
    if not sd > 0:
        return np.array([mu]), np.array([1.0])
    x = (e - mu) / sd
    n = x.size
    q = min(q, n)
    V = np.empty((q, n))
    v = np.full(n, 1.0 / np.sqrt(n))
    v_prev = np.zeros(n)
    alphas: list[float] = []
    betas: list[float] = []
    b = 0.0
    for k in range(q):
        V[k] = v
        w = x * v
        a = float(w @ v)
        w -= a * v + b * v_prev
        w -= V[: k + 1].T @ (V[: k + 1] @ w)
        alphas.append(a)
        b_new = float(np.linalg.norm(w))
        if b_new < 1e-10 or k == q - 1:
            break
        betas.append(b_new)
        v_prev, v, b = v, w / b_new, b_new
    J = (
        np.diag(alphas)
        + np.diag(betas[: len(alphas) - 1], 1)
        + np.diag(betas[: len(alphas) - 1], -1)
    )
    nodes, vecs = np.linalg.eigh(J)
    return mu + sd * nodes, vecs[0] ** 2


def _smear_gauss(t: Transform, eta: np.ndarray, e: np.ndarray) -> np.ndarray | None:
    """Smearing by Gauss quadrature over the residual distribution, verified before use.

    Used for the etas whose whole range eta + e_i keeps clear of every point
    where the inverse is not analytic (pole, clip, branch change); the others
    are computed exactly.  The rule is exact for polynomial inverses of degree
    < 2q; otherwise its error grows towards the nearest singular point, so it is
    checked against the exact mean at the safe etas closest to each singular
    point and at the median, and the safe margin is widened until every check
    agrees to SMEAR_RTOL.  ``None`` means: no eta could use the rule.
    """
    sing = np.asarray(t.inverse_singularities(), dtype=float)
    lo_e, hi_e = float(e.min()), float(e.max())
    spread = max(hi_e - lo_e, 1e-12)
    out = np.full(eta.size, np.nan)
    rules: dict[int, tuple[np.ndarray, np.ndarray]] = {}
    margin = 0.0
    for _ in range(6):
        safe = np.ones(eta.size, dtype=bool)
        for s in sing:
            safe &= (eta + lo_e > s + margin) | (eta + hi_e < s - margin)
        if not np.any(safe):
            return None
        es = eta[safe]
        pts = [es.min(), np.median(es), es.max()]
        for s in sing:  # the safe etas closest to each singular point, on either side
            below, above = es[es + hi_e < s], es[es + lo_e > s]
            pts += [below.max()] if below.size else []
            pts += [above.min()] if above.size else []
        check = np.unique(np.array(pts))
        exact = _exact(t, check, e)
        if not np.all(np.isfinite(exact)):
            return None
        for q in GAUSS_NODES:
            if q not in rules:
                rules[q] = gauss_rule(e, q)
            nodes, w = rules[q]
            approx = t.inverse(check[:, None] + nodes[None, :]) @ w
            err = np.abs(approx - exact) / np.maximum(np.abs(exact), 1e-300)
            if np.all(np.isfinite(err)) and np.max(err) <= SMEAR_RTOL:
                out[safe] = t.inverse(es[:, None] + nodes[None, :]) @ w
                if np.any(~safe):
                    out[~safe] = _exact(t, eta[~safe], e)
                return out if np.all(np.isfinite(out[safe])) else None
        if sing.size == 0:
            return None
        margin = 2.0 * margin + 0.1 * spread
    return None


def smear_sqrt(eta: FloatArray, e: FloatArray) -> FloatArray:
    """mean_i max(eta + e_i, 0)^2 exactly, for one candidate or many at once: ``eta`` (m,)
    with residuals ``e`` (n,), or ``eta`` (m, C) with ``e`` (n, C), column j of ``eta`` smeared
    over column j of ``e``.

    Where no term is cut off at zero (eta + min e > 0) the square expands:
    eta^2 + 2 eta mean(e) + mean(e^2).  Elsewhere the terms with e_i > -eta are summed from
    sorted residuals and suffix sums (sorted once for all columns that need it).
    """
    one = e.ndim == 1
    E = e[:, None] if one else e
    H = eta[:, None] if one else eta
    n = E.shape[0]
    out: FloatArray = H * H + 2.0 * H * E.mean(axis=0) + (E * E).mean(axis=0)
    cut = ~(H + E.min(axis=0) > 0)  # entries with a term cut off at zero
    cols = np.flatnonzero(cut.any(axis=0))
    if cols.size:
        es = np.sort(E[:, cols], axis=0)
        zero = np.zeros((1, cols.size))
        s1 = np.concatenate([np.cumsum(es[::-1], axis=0)[::-1], zero])
        s2 = np.concatenate([np.cumsum((es * es)[::-1], axis=0)[::-1], zero])
        for i, j in enumerate(cols.tolist()):
            rows = np.flatnonzero(cut[:, j])
            x = H[rows, j]
            k = np.searchsorted(es[:, i], -x, side="right")  # terms with e_i > -eta count
            out[rows, j] = ((n - k) * x * x + 2.0 * x * s1[k, i] + s2[k, i]) / n
    return out[:, 0] if one else out


def _exact_pair(t: Transform, eta: np.ndarray, e: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """S(eta) and S'(eta) exactly (mean over defined terms)."""
    S = np.empty(eta.size)
    D = np.empty(eta.size)
    step = max(1, _CHUNK // max(e.size, 1))
    for s in range(0, eta.size, step):
        z = eta[s : s + step, None] + e[None, :]
        v = t.inverse(z)
        d = t.inverse_derivative(z)
        ok = ~(np.isnan(v) | np.isnan(d))
        cnt = ok.sum(axis=1)
        S[s : s + step] = np.where(
            cnt > 0, np.where(ok, v, 0.0).sum(axis=1) / np.maximum(cnt, 1), np.nan
        )
        D[s : s + step] = np.where(
            cnt > 0, np.where(ok, d, 0.0).sum(axis=1) / np.maximum(cnt, 1), np.nan
        )
    return S, D


def _hermite(
    x0: FloatArray,
    x1: FloatArray,
    s0: FloatArray,
    s1: FloatArray,
    d0: FloatArray,
    d1: FloatArray,
    x: FloatArray,
) -> FloatArray:
    h = x1 - x0
    u = (x - x0) / h
    h00 = (1 + 2 * u) * (1 - u) ** 2
    h10 = u * (1 - u) ** 2
    h01 = u * u * (3 - 2 * u)
    h11 = u * u * (u - 1)
    return h00 * s0 + h10 * h * d0 + h01 * s1 + h11 * h * d1


MAX_NODES = 1025


def _smear_interpolated(t: Transform, eta: np.ndarray, e: np.ndarray) -> np.ndarray:
    """Adaptive piecewise-cubic Hermite interpolation of S(eta) with exact values and slopes.

    An interval is accepted when the Hermite cubic from its end points matches
    the exact S at its midpoint to SMEAR_RTOL (relative), and so does the error its
    slope there implies half an interval away; that very cubic is then the one
    used.  Otherwise the interval is split at the midpoint.  Etas in intervals still
    unresolved after MAX_NODES nodes are computed exactly.
    """
    lo, hi = float(eta.min()), float(eta.max())
    if hi - lo <= 1e-12 * max(1.0, abs(lo)):
        return _exact(t, eta, e)
    x = np.linspace(lo, hi, 9)
    S, D = _exact_pair(t, x, e)
    ok_iv = np.zeros(8, dtype=bool)  # accepted flag per interval [x_i, x_i+1]
    pending = np.arange(8)
    while pending.size and x.size + pending.size <= MAX_NODES:
        a, b = pending, pending + 1
        m = 0.5 * (x[a] + x[b])
        Sm, Dm = _exact_pair(t, m, e)
        est = _hermite(x[a], x[b], S[a], S[b], D[a], D[b], m)
        h = x[b] - x[a]
        slope = 1.5 * (S[b] - S[a]) / h - 0.25 * (D[a] + D[b])  # the cubic's slope at m
        tol = SMEAR_RTOL * np.maximum(np.abs(Sm), 1e-300)
        # the value at m and the slope there (times h/2, the error it implies half an
        # interval away): a kink in S can leave the value right while the cubic is wrong
        good = (
            np.isfinite(est)
            & np.isfinite(Sm)
            & np.isfinite(slope)
            & (np.abs(est - Sm) <= tol)
            & (np.abs(slope - Dm) * 0.5 * h <= tol)
        )
        # An accepted interval keeps the cubic that was checked.  (Accepting the two halves
        # instead would use cubics nobody checked: with kinks in S they can be far worse.)
        ok_iv[a[good]] = True
        split = ~good
        xm, Smn, Dmn = m[split], Sm[split], Dm[split]
        order = np.argsort(np.concatenate([x, xm]), kind="stable")
        x = np.concatenate([x, xm])[order]
        S = np.concatenate([S, Smn])[order]
        D = np.concatenate([D, Dmn])[order]
        flag_nodes = np.concatenate([ok_iv, [False]])  # flag of the interval starting at node
        new_flags = np.concatenate([flag_nodes, np.zeros(xm.size, dtype=bool)])[order]
        ok_iv = new_flags[:-1]
        pending = np.flatnonzero(~ok_iv)
    out = np.empty(eta.size)
    idx = np.clip(np.searchsorted(x, eta, side="right") - 1, 0, x.size - 2)
    inter = ok_iv[idx]
    i = idx[inter]
    out[inter] = _hermite(x[i], x[i + 1], S[i], S[i + 1], D[i], D[i + 1], eta[inter])
    if np.any(~inter):
        out[~inter] = _exact(t, eta[~inter], e)
    return out
