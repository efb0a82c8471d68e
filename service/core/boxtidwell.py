"""Powers of positive predictors estimated from the data (Box & Tidwell 1962).

Model: z = X_f b_f + sum_j b_j w_j(a_j) + e, with ``X_f`` the fixed columns
(intercept, other predictors), x_j > 0 and w_j(a) the power of x_j.  With an
intercept the column is written in the Box-Cox form w(a) = (x^a - 1)/a (log x
at a = 0), which spans the same space as x^a and stays well conditioned near
a = 0; without one it is x^a itself.

Box & Tidwell (1962) "Transformation of the independent variables",
Technometrics 4:531-550: linearise w(a') ~ w(a) + (a' - a) dw/da, regress z on
[X_f, w(a)] for b, then on [X_f, w(a), dw/da] for gamma, and update
a <- a + gamma / b (a Gauss-Newton step for the least-squares problem in
(b, a)).  Steps that raise the residual sum of squares are halved (damping),
powers stay in [-3, 3], and the iteration stops when every step is below 1e-6 (also
when halving the step below 1e-6 gives no decrease: the point is then stationary to
that accuracy), or when two steps in a row lower the RSS by at most 1e-12 of itself (the
relative-reduction test of nonlinear least squares, e.g. MINPACK's ftol, here far
stricter; it ends the drift of a power the data barely determine).  From the second
step on, each iteration first tries the step extrapolated from the last two iterates
(Anderson mixing of depth one, for one power the secant step on the Gauss-Newton step;
:func:`_extrapolated`), where the plain steps contract only linearly, and takes the
damped Gauss-Newton step when that does not lower the RSS.

Standard error: at the estimate the coefficient on dw/da estimates b (a - a_hat),
so se(a_hat) = se(gamma) / |b|, the usual nonlinear least-squares standard
error with sigma^2 = RSS / (n - p_f - 2k) (the same as scipy's ``curve_fit``).
The interval is the Wald interval a_hat +- z_{0.975} se.

When the iteration does not converge (b near 0, narrow range of x, oscillation)
the powers are found by minimising the profile RSS over a directly (bounded
Brent per power, cycling over the powers, at most ``PROFILE_MAX_POWERS`` powers;
more fail cleanly); ``method`` says which path was used.  A search given a
``start`` (the re-estimate in a training fold, started from the all-rows
estimate) looks within ``start +- LOCAL_HALF_WIDTH`` only (design choice: the
training rows are most of the rows, so their optimum is near the all-rows one,
and a whole-range grid on every fold would cost ten times as much).

Every training fold of a large table (``estimate_fold_powers_by_series``): the same
steps and stopping rules, but each trial is assembled from cross-products summed once
over the rows (Taylor series of the power columns about the start, within a radius set
by the folds' first steps and the all-rows standard error; the response centred on the
all-rows fit so the RSS keeps its digits; see :class:`_Series`).  A fold whose trial
leaves the radius, needs QR or does not converge is estimated by the exact path.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
from scipy import optimize, stats

from . import sources as src
from . import transforms as tr
from .errors import CandidateFailure
from .fitting import (
    qr_solve,
    solve_batch,
    solve_batch_nested,
    solve_batch_with_inverse_diagonal,
)

POWER_BOUNDS = (-3.0, 3.0)
TOL = 1e-6
FTOL = 1e-12  # relative RSS decrease below which two steps in a row count as converged
MAX_ITER = 30
#: x^a - 1 by expm1 where |a log x| is below this, else as exp(a log x) - 1 (exp costs half
#: of expm1; there the subtraction loses at most a factor 1 + e^u / |e^u - 1| <= 3.6 of
#: relative accuracy, a few units in the last place)
EXPM1_BELOW = 0.5
EXTRAPOLATION_MAX = 10.0  # an extrapolated step is at most this many Gauss-Newton steps long
PROFILE_MAX_POWERS = 2  # the profile fallback searches at most this many powers at once
CHUNK_ROWS = 32_768  # rows per block of a trial's passes (cache-sized)
STACK_CELLS = 400_000  # folds x rows stepped in one stack (several candidates' folds)
LOCAL_HALF_WIDTH = 0.5  # a started (per-fold) profile fallback searches start +- this
_Z975 = 1.959963984540054  # standard normal 0.975 quantile


@dataclass(frozen=True)
class PowerFit:
    powers: np.ndarray  # (k,)
    std_errors: np.ndarray | None  # (k,) or None when the augmented design is singular
    converged: bool
    iterations: int
    method: str  # "box_tidwell" | "profile"
    rss: float

    def summary(self, j: int, level: float = 0.95) -> PowerSummary:
        """Power j as reported: estimate, standard error, Wald interval, nearest ladder power."""
        a = float(self.powers[j])
        se = None if self.std_errors is None else float(self.std_errors[j])
        if se is not None and not math.isfinite(se):
            se = None
        lo = hi = None
        ladder = None
        if se is not None:
            zq = _Z975 if abs(level - 0.95) < 1e-12 else float(stats.norm.ppf(0.5 + level / 2))
            lo, hi = a - zq * se, a + zq * se
            inside = [p for p in tr.LADDER if lo <= p <= hi]
            if inside:
                ladder = min(inside, key=lambda p: (abs(p - a), abs(p)))
        at_bound = bool(a <= POWER_BOUNDS[0] + 1e-6 or a >= POWER_BOUNDS[1] - 1e-6)
        return PowerSummary(
            a, se, lo, hi, level, ladder, self.converged, self.iterations, self.method, at_bound
        )


@dataclass(frozen=True)
class PowerSummary:
    """One estimated predictor power as reported: the estimate, its standard error and Wald
    interval at ``level`` (None when the standard error is undefined), the nearest ladder
    power inside the interval (None if none is), how the estimate was found (``method``:
    "box_tidwell" or "profile"), whether it sits at the search bound, and the
    re-estimates in the training folds when the search made them."""

    power: float
    std_error: float | None
    ci_low: float | None
    ci_high: float | None
    level: float
    ladder: float | None
    converged: bool
    iterations: int
    method: str
    at_bound: bool
    per_fold: tuple[float, ...] | None = None

    @property
    def source(self) -> str:
        """The method's published reference."""
        return src.POWER[self.method]


def power_columns(
    logx: np.ndarray, a: np.ndarray, boxcox_form: bool
) -> tuple[np.ndarray, np.ndarray]:
    """w(a) and dw/da for every power: ``logx`` (n, k) holds log x_j, ``a`` (k,)."""
    W = np.empty_like(logx)
    D = np.empty_like(logx)
    for j in range(logx.shape[1]):
        L = logx[:, j]
        aj = float(a[j])
        if boxcox_form:
            if abs(aj) < 1e-12:
                W[:, j] = L
                D[:, j] = 0.5 * L * L
                continue
            u = aj * L
            absu = np.abs(u)
            small = absu < 1e-3
            # (x^a log x - w)/a, by its series where the difference cancels
            with np.errstate(over="ignore", invalid="ignore"):
                xa = np.exp(u)
                em1 = xa - 1.0
                near = absu < EXPM1_BELOW
                if near.any():
                    np.expm1(u, out=em1, where=near)
                np.divide(em1, aj, out=W[:, j])
                xa *= L
                xa -= W[:, j]
                np.divide(xa, aj, out=D[:, j])
            if small.any():
                us, Ls = u[small], L[small]
                D[small, j] = Ls * Ls * (0.5 + us / 3.0 + us * us / 8.0)
        else:
            xa = np.exp(aj * L)
            W[:, j] = xa
            D[:, j] = xa * L
    return W, D


def _normal_solve(G: np.ndarray, c: np.ndarray) -> np.ndarray | None:
    """The solution of G b = c from the column-scaled Cholesky factor, or None when the
    scaled G is ill-conditioned (``fitting.solve_batch``, condition limit 1e7)."""
    B, ok = solve_batch(G[None], c[None])
    return B[0] if ok[0] else None


def _fit(
    A: np.ndarray, z: np.ndarray, with_cov: bool = False
) -> tuple[np.ndarray, np.ndarray | None, float]:
    """Least squares (coef, (A'A)^-1 or None, RSS): normal equations of the column-scaled
    matrix when its condition number is below 1e7, else pivoted QR."""
    cov = None
    coef = None if with_cov else _normal_solve(A.T @ A, A.T @ z)
    if coef is None:
        coef, cov, _ = qr_solve(A, z, with_condition=False)
    r = z - A @ coef
    return coef, cov, float(r @ r)


# W, D, X_f'[W D], [W D]'[W D], [W D]'z of one trial
_Cache = tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]


class _Problem:
    """One estimation problem with the cross-products of its fixed part computed once.

    Every trial power needs the least-squares fit of z on [X_f, W(a)] (and, for the step, on
    [X_f, W(a), D(a)]).  Their normal equations are assembled from X_f'X_f and X_f'z (once)
    and X_f'[W D], [W D]'[W D], [W D]'z (per trial: O(n (p_f + 2k) 2k) work, no copy of
    X_f), solved by Cholesky of the column-scaled matrix when its condition number is below
    1e7, else by pivoted QR of the assembled design (``_fit``).  The RSS is always computed
    from the residuals themselves, never from the normal equations.
    """

    def __init__(self, z: np.ndarray, Xf: np.ndarray, logx: np.ndarray, boxcox_form: bool):
        self.z, self.Xf, self.logx, self.bc = z, Xf, logx, boxcox_form
        self.pf, self.k = Xf.shape[1], logx.shape[1]
        self.Gff = Xf.T @ Xf
        self.cf = Xf.T @ z
        self.logxT = np.ascontiguousarray(logx.T)  # (k, n): rows along the last axis

    def trial(self, a: np.ndarray) -> tuple[float, np.ndarray | None, _Cache | None]:
        """State at powers ``a``: (rss, coef of [X_f, W]) plus the cross-products, or
        (inf, None, None) when a column or the fit is not finite.

        Rows are taken in blocks of ``CHUNK_ROWS`` so that a block's columns, cross-products
        and residuals are computed while it is in cache (two passes over the data in all).
        """
        n, k, pf = self.z.size, self.k, self.pf
        W = np.empty((n, k))
        D = np.empty((n, k))
        FWD = np.zeros((pf, 2 * k))
        WDWD = np.zeros((2 * k, 2 * k))
        wdz = np.zeros(2 * k)
        for s in range(0, n, CHUNK_ROWS):
            sl = slice(s, s + CHUNK_ROWS)
            Wc, Dc = power_columns(self.logx[sl], a, self.bc)
            if not np.all(np.isfinite(Wc)):
                return math.inf, None, None
            W[sl], D[sl] = Wc, Dc
            WDc = np.concatenate([Wc, Dc], axis=1)
            FWD += self.Xf[sl].T @ WDc
            WDWD += WDc.T @ WDc
            wdz += WDc.T @ self.z[sl]
        cache = (W, D, FWD, WDWD, wdz)
        coef = self.solve(cache, with_d=False)
        if coef is None:
            return math.inf, None, None
        cf, cw = coef[:pf], coef[pf:]
        rss = 0.0
        for s in range(0, n, CHUNK_ROWS):
            sl = slice(s, s + CHUNK_ROWS)
            r = self.z[sl] - self.Xf[sl] @ cf - W[sl] @ cw
            rss += float(r @ r)
        return rss, coef, cache

    def rss_many(self, A: np.ndarray) -> np.ndarray:
        """RSS (Q,) of the fits of z on [X_f, W(a)] at the powers ``A`` (Q, k), inf where a
        column or the fit is not finite: the RSS :meth:`trial` gives, without the derivative
        columns (a profile search needs no step) and with the fits of several powers solved
        as one stack (``fitting.solve_batch``, pivoted QR where the condition check fails),
        at most ``STACK_CELLS`` power-vector x rows at a time."""
        n = self.z.size
        step = max(1, STACK_CELLS // max(n, 1))
        return np.concatenate(
            [self._rss_group(A[s : s + step]) for s in range(0, A.shape[0], step)]
        )

    def _rss_group(self, A: np.ndarray) -> np.ndarray:
        n, k, pf = self.z.size, self.k, self.pf
        Q = A.shape[0]
        P1 = pf + k
        G = np.empty((Q, P1, P1))
        G[:, :pf, :pf] = self.Gff
        c = np.empty((Q, P1))
        c[:, :pf] = self.cf
        SX = np.zeros((Q, k, pf))
        SW = np.zeros((Q, k, k))
        Sz = np.zeros((Q, k, 1))
        blocks: list[np.ndarray] = []
        with np.errstate(over="ignore", invalid="ignore"):
            for s in range(0, n, CHUNK_ROWS):
                sl = slice(s, s + CHUNK_ROWS)
                L = self.logxT[None, :, sl]  # (1, k, b)
                W = np.empty((Q, k, L.shape[2]))
                _power_w_into(L, A, self.bc, W)
                SX += np.matmul(W, self.Xf[sl])
                SW += np.matmul(W, np.swapaxes(W, 1, 2))
                Sz += np.matmul(W, self.z[sl, None])
                blocks.append(W)
            fin = np.all(np.isfinite(np.diagonal(SW, axis1=1, axis2=2)), axis=1)
            for q in np.flatnonzero(~fin):  # a sum of squares can overflow: check the elements
                fin[q] = all(np.all(np.isfinite(b[q])) for b in blocks)
            G[:, pf:, :pf] = SX
            G[:, :pf, pf:] = np.swapaxes(SX, 1, 2)
            G[:, pf:, pf:] = SW
            c[:, pf:] = Sz[:, :, 0]
            coef = np.full((Q, P1), np.nan)
            at = np.flatnonzero(fin)
            if at.size:
                B, ok = solve_batch(G[at], c[at])
                coef[at[ok]] = B[ok]
                for q in at[~ok]:
                    W = np.concatenate([b[q] for b in blocks], axis=1).T
                    try:
                        coef[q], _, _ = qr_solve(
                            np.hstack([self.Xf, W]), self.z, with_condition=False
                        )
                    except CandidateFailure:  # rank-deficient: no fit, the RSS is inf
                        coef[q] = np.nan
            rss = np.zeros(Q)
            for j, s in enumerate(range(0, n, CHUNK_ROWS)):
                sl = slice(s, s + CHUNK_ROWS)
                r = self.z[sl] - coef[:, :pf] @ self.Xf[sl].T
                r -= np.matmul(coef[:, None, pf:], blocks[j])[:, 0]
                rss += np.einsum("qb,qb->q", r, r)
        good = fin & np.all(np.isfinite(coef), axis=1) & np.isfinite(rss)
        return np.where(good, rss, math.inf)

    def solve(self, cache: _Cache, with_d: bool) -> np.ndarray | None:
        W, D, FWD, WDWD, wdz = cache
        if with_d and not np.all(np.isfinite(D)):
            return None
        m = 2 * self.k if with_d else self.k
        pf = self.pf
        G = np.empty((pf + m, pf + m))
        G[:pf, :pf] = self.Gff
        G[:pf, pf:] = FWD[:, :m]
        G[pf:, :pf] = FWD[:, :m].T
        G[pf:, pf:] = WDWD[:m, :m]
        coef = _normal_solve(G, np.concatenate([self.cf, wdz[:m]]))
        if coef is not None:
            return coef
        A = np.hstack([self.Xf, W, D] if with_d else [self.Xf, W])
        try:
            coef, _, _ = qr_solve(A, self.z, with_condition=False)
        except CandidateFailure:
            return None
        return coef if np.all(np.isfinite(coef)) else None


def _inputs(
    z: np.ndarray, Xf: np.ndarray, x: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """(z, X_f, x (n, k), log x) as float arrays after the checks of an all-rows estimate:
    x > 0 and more rows than the parameters + 1 (else :class:`CandidateFailure`)."""
    z = np.asarray(z, dtype=float)
    Xf = np.asarray(Xf, dtype=float)
    x = np.asarray(x, dtype=float)
    if x.ndim == 1:
        x = x[:, None]
    if np.any(x <= 0):
        raise CandidateFailure("an estimated power needs a predictor with values > 0")
    n, k = z.size, x.shape[1]
    if n <= Xf.shape[1] + 2 * k + 1:
        raise CandidateFailure(f"{n} rows are too few to estimate {k} predictor power(s)")
    return z, Xf, x, np.log(x)


def estimate_powers(
    z: np.ndarray,
    Xf: np.ndarray,
    x: np.ndarray,
    start: np.ndarray | None = None,
    boxcox_form: bool = True,
    with_se: bool = True,
) -> PowerFit:
    """Box-Tidwell powers of the columns of ``x`` (n, k), all > 0, beside fixed columns ``Xf``.

    ``z`` (n,) is the response on its model scale; ``start`` (k,) the first
    powers (default 1: the untransformed predictors).  ``with_se=False`` skips the
    standard errors (the per-fold re-estimates need only the powers).  Raises
    :class:`CandidateFailure` when neither the iteration nor the profile search
    gives finite powers.
    """
    z, Xf, x, logx = _inputs(z, Xf, x)
    k = logx.shape[1]
    n = z.size
    p = Xf.shape[1] + 2 * k
    prob = _Problem(z, Xf, logx, boxcox_form)
    a = np.ones(k) if start is None else np.clip(np.asarray(start, float).copy(), *POWER_BOUNDS)
    rss, coef, cache = prob.trial(a)
    converged = False
    it = 0
    flat = 0  # consecutive steps that lowered the RSS by at most FTOL (relative)
    prev: tuple[np.ndarray, np.ndarray] | None = None  # the last iterate and its step
    if math.isfinite(rss):
        for it in range(1, MAX_ITER + 1):  # noqa: B007  (the count is reported after the loop)
            assert coef is not None and cache is not None  # they come with a finite RSS
            b = coef[prob.pf :]
            g = prob.solve(cache, with_d=True)
            if g is None:
                break
            gamma = g[prob.pf + k :]
            if np.any(np.abs(b) < 1e-300):
                break
            step = gamma / b
            if not np.all(np.isfinite(step)):
                break
            ext = np.full(k, np.nan) if prev is None else _extrapolated(a, step, *prev)
            prev = (a, step)
            step = np.clip(step, -1.0, 1.0)  # at most one rung of the ladder per step
            accepted = False
            if float(np.max(np.abs(step))) >= TOL and np.all(np.isfinite(ext)):
                a_new = np.clip(a + np.clip(ext, -1.0, 1.0), *POWER_BOUNDS)
                rss_new, coef_new, cache_new = prob.trial(a_new)
                accepted = rss_new <= rss * (1.0 + 1e-12)
            while not accepted and float(np.max(np.abs(step))) >= TOL:
                a_new = np.clip(a + step, *POWER_BOUNDS)
                rss_new, coef_new, cache_new = prob.trial(a_new)
                if rss_new <= rss * (1.0 + 1e-12):
                    accepted = True
                    break
                step = step / 2.0
            if not accepted:
                # The Gauss-Newton direction is a descent direction, so no decrease within
                # TOL of a means a is stationary to that accuracy (or the RSS is flat in a).
                converged = bool(float(np.max(np.abs(step))) < TOL)
                break
            moved = float(np.max(np.abs(a_new - a)))
            flat = flat + 1 if rss - rss_new <= FTOL * rss else 0
            a, rss, coef, cache = a_new, rss_new, coef_new, cache_new
            if moved < TOL or flat >= 2:
                converged = True
                break
    a, rss, method = _fallback(prob, a, rss, converged, it, start is not None)
    se = _std_errors(z, Xf, logx, a, boxcox_form, n, p) if with_se else None
    return PowerFit(a, se, converged or method == "profile", it, method, rss)


def _extrapolated(
    a: np.ndarray, s: np.ndarray, a_prev: np.ndarray, s_prev: np.ndarray
) -> np.ndarray:
    """The step to the point where the Gauss-Newton step would vanish, extrapolated from
    two iterates: powers ``a`` with step ``s`` and the previous ``a_prev``, ``s_prev``
    (each (k,), or (F, k) one row per fold); NaN (all of a row) where it is not taken.

    Near the optimum the Gauss-Newton map a -> a + s(a) contracts linearly, at a rate
    that grows with the residuals' size times the curvature of the power columns (slow,
    often alternating, convergence for a power the data determine poorly).  With
    da = a - a_prev and ds = s - s_prev the step is s - gamma (da + ds), gamma = ds's /
    ds'ds: Anderson mixing of depth one, which for one power is the secant step
    -s da / ds on s(a) = 0 (superlinear, Walker & Ni 2011).  It is taken only when it is
    finite, points the way of s (s'step > 0) and is at most ``EXTRAPOLATION_MAX`` times
    as long as s; the iteration tries it first and takes the damped Gauss-Newton step as
    before when it does not lower the RSS, so every accepted step still lowers the RSS
    and the stopping rules are those of the plain iteration."""
    da, ds = a - a_prev, s - s_prev
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        gamma = np.sum(ds * s, axis=-1, keepdims=True) / np.sum(ds * ds, axis=-1, keepdims=True)
        step = s - gamma * (da + ds)
        size = np.max(np.abs(step), axis=-1, keepdims=True)
        ok = (
            np.all(np.isfinite(step), axis=-1, keepdims=True)
            & (np.sum(step * s, axis=-1, keepdims=True) > 0)
            & (size <= EXTRAPOLATION_MAX * np.max(np.abs(s), axis=-1, keepdims=True))
        )
    out: np.ndarray = np.where(ok, step, np.nan)
    return out


def _fallback(
    prob: _Problem, a: np.ndarray, rss: float, converged: bool, it: int, started: bool
) -> tuple[np.ndarray, float, str]:
    """(powers, rss, method) after the iteration: the iterate when it converged, else the
    profile search (within ``start +- LOCAL_HALF_WIDTH`` for a started problem whose start
    had a finite RSS, over the whole range otherwise)."""
    k = prob.k
    if converged:
        return a, rss, "box_tidwell"
    if k > PROFILE_MAX_POWERS:
        raise CandidateFailure(
            f"the Box-Tidwell iteration for {k} powers did not converge in "
            f"{it} steps; estimate fewer powers at once"
        )
    if started and math.isfinite(rss):
        a, rss = _profile_search(prob, a, local=LOCAL_HALF_WIDTH)
    else:
        a, rss = _profile_search(prob, a if math.isfinite(rss) else np.ones(k))
    if not math.isfinite(rss):
        raise CandidateFailure(
            "the predictor power could not be estimated (the residual sum "
            "of squares is not finite for any power in [-3, 3])"
        )
    return a, rss, "profile"


def _std_errors(
    z: np.ndarray,
    Xf: np.ndarray,
    logx: np.ndarray,
    a: np.ndarray,
    boxcox_form: bool,
    n: int,
    p: int,
) -> np.ndarray | None:
    """The standard errors of the powers ``a`` of one all-rows problem
    (:func:`_std_errors_many` of a stack of one)."""
    folds = _Folds(
        z[None], Xf[None], logx[None], [np.arange(n)], boxcox_form, None, None, np.zeros(1, int)
    )
    return _std_errors_many(folds, np.asarray(a, float)[None], p)[0]


def _std_errors_many(folds: _Folds, A: np.ndarray, p: int) -> list[np.ndarray | None]:
    """Standard errors of the powers ``A`` (C, k) of all-rows problems stacked in ``folds``
    (one per candidate, all rows): se_j = sqrt(s^2 [(A'A)^-1]_jj) / |b_j| for the column
    dw_j/da of A = [X_f, W, D] at the estimate, s^2 = RSS(A) / (n - p) from the residuals,
    b_j the coefficient of w_j in the fit on [X_f, W] (see the module docstring).  The
    inverse diagonal and both fits come from the column-scaled normal equations of A, one
    stacked factorisation, where they pass the condition check of ``fitting.solve_batch``;
    the others are computed by pivoted QR (:func:`_std_errors_exact`).  None where the
    augmented design is singular."""
    C = A.shape[0]
    pf, k = folds.pf, folds.k
    P1 = pf + k
    n = folds.Zt.shape[1]
    idx = np.arange(C)
    G, c, blocks, wfin, dfin = folds.assemble(idx, A)
    out: list[np.ndarray | None] = [None] * C
    exact = np.ones(C, dtype=bool)
    both = np.flatnonzero(wfin & dfin)
    if both.size:
        Bf, ok, B1, dinv = solve_batch_with_inverse_diagonal(G[both], c[both], P1)
        good = both[ok]
        sub = [b[good] for b in blocks] if good.size < C else blocks
        rss2 = folds.residual_sums(good, sub, Bf[ok])
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            var_g = dinv[ok][:, P1:] * (rss2 / (n - p))[:, None]
            se = np.sqrt(np.maximum(var_g, 0.0)) / np.abs(B1[ok][:, pf:])
        se = np.where(np.isfinite(se), se, np.nan)
        for j, f in enumerate(good):
            out[f] = se[j]
        exact[good] = False
    for f in np.flatnonzero(exact):
        o = int(folds.owner[f])
        out[f] = _std_errors_exact(folds.Z[f], folds.Xf[o], folds.logx[o], A[f], folds.bc, n, p)
    return out


def _std_errors_exact(
    z: np.ndarray,
    Xf: np.ndarray,
    logx: np.ndarray,
    a: np.ndarray,
    boxcox_form: bool,
    n: int,
    p: int,
) -> np.ndarray | None:
    """:func:`_std_errors_many` of one problem by pivoted QR of the designs (the fit on [X_f,
    W] by normal equations where they pass the condition check)."""
    W, D = power_columns(logx, a, boxcox_form)
    k = logx.shape[1]
    try:
        coef1, _, _ = _fit(np.hstack([Xf, W]), z)
        _coef2, cov2, rss2 = _fit(np.hstack([Xf, W, D]), z, with_cov=True)
    except CandidateFailure:
        return None
    assert cov2 is not None  # with_cov=True always returns it
    b = coef1[Xf.shape[1] :]
    s2 = rss2 / (n - p)
    var_g = np.diag(cov2)[Xf.shape[1] + k :] * s2
    with np.errstate(divide="ignore", invalid="ignore"):
        se = np.sqrt(np.maximum(var_g, 0.0)) / np.abs(b)
    return np.where(np.isfinite(se), se, np.nan)


def _profile_search(
    prob: _Problem, a0: np.ndarray, local: float | None = None
) -> tuple[np.ndarray, float]:
    """Minimise RSS over the powers, cycling over the powers: a grid over the whole range then
    bounded Brent near its best point, or with ``local`` bounded Brent alone within
    ``a0 +- local`` (re-estimates in training folds, started from the all-rows estimate).
    The RSS at each point is :meth:`_Problem.rss_many`'s (the grid's points in one stack)."""
    a = np.asarray(a0, float).copy()
    k = a.size
    best = float(prob.rss_many(a[None])[0])
    grid = np.linspace(POWER_BOUNDS[0], POWER_BOUNDS[1], 25)
    for _sweep in range(4):
        before = a.copy()
        for j in range(k):

            def f(v: float, j: int = j) -> float:
                trial = a.copy()
                trial[j] = v
                return float(prob.rss_many(trial[None])[0])

            if local is not None:
                lo, hi = max(POWER_BOUNDS[0], a[j] - local), min(POWER_BOUNDS[1], a[j] + local)
                vals, i = None, None
            else:
                points = np.repeat(a[None], grid.size, axis=0)
                points[:, j] = grid
                vals = prob.rss_many(points)  # the whole grid in one stack
                if not np.any(np.isfinite(vals)):
                    continue
                i = int(np.argmin(np.where(np.isfinite(vals), vals, np.inf)))
                lo, hi = grid[max(i - 1, 0)], grid[min(i + 1, grid.size - 1)]
            res = optimize.minimize_scalar(
                f, bounds=(lo, hi), method="bounded", options={"xatol": 1e-8}
            )
            cand, val = (float(res.x), float(res.fun))
            if vals is not None and vals[i] < val:
                cand, val = float(grid[i]), float(vals[i])
            if val <= best:
                a[j], best = cand, val
        if k == 1 or np.max(np.abs(a - before)) < TOL:
            break
    return a, best


def concrete_transform(a: float) -> tr.Transform:
    """The predictor transform for an estimated power (marked estimated)."""
    if abs(a) < 1e-6:
        return tr.Transform("log", shift=0.0, estimated=True)
    return tr.Transform("power", exponent=float(a), estimated=True)


ESTIMATED = tr.Transform("power", exponent=None, estimated=True)


def is_open(t: tr.Transform) -> bool:
    """The search's 'estimate this power' option (no exponent yet)."""
    return t.name == "power" and t.exponent is None


# ------------------------------------------------------------ every training fold at once
def _power_columns_into(
    L: np.ndarray, A: np.ndarray, boxcox_form: bool, W: np.ndarray, D: np.ndarray
) -> None:
    """:func:`power_columns` for several power vectors at once, written into ``W`` and ``D``
    (F, k, b): ``L`` (F, k, b) log x, one column per row of it (rows of the table along the
    last axis, so every pass runs over contiguous memory), ``A`` (F, k) powers; element for
    element the arithmetic of :func:`power_columns`."""
    a3 = A[:, :, None]
    if not boxcox_form:
        np.multiply(a3, L, out=W)
        np.exp(W, out=W)
        np.multiply(W, L, out=D)
        return
    zero = np.abs(A) < 1e-12
    if zero.any():
        a3 = np.where(zero, 1.0, A)[:, :, None]
    u = a3 * L
    absu = np.abs(u)
    xa = np.exp(u)
    em1 = xa - 1.0
    near = absu < EXPM1_BELOW
    if near.any():
        np.expm1(u, out=em1, where=near)
    np.divide(em1, a3, out=W)
    xa *= L
    xa -= W
    np.divide(xa, a3, out=D)
    small = absu < 1e-3
    if small.any():
        Ls, us = L[small], u[small]
        D[small] = Ls * Ls * (0.5 + us / 3.0 + us * us / 8.0)
    if zero.any():
        z3 = np.broadcast_to(zero[:, :, None], L.shape)
        np.copyto(W, L, where=z3)
        np.copyto(D, 0.5 * L * L, where=z3)


def _power_w_into(L: np.ndarray, A: np.ndarray, boxcox_form: bool, W: np.ndarray) -> None:
    """The power columns alone of :func:`_power_columns_into` (``L`` (1 or F, k, b), ``A``
    (F, k), into ``W`` (F, k, b)): element for element the arithmetic of :func:`power_columns`'
    w(a)."""
    a3 = A[:, :, None]
    if not boxcox_form:
        np.multiply(a3, L, out=W)
        np.exp(W, out=W)
        return
    zero = np.abs(A) < 1e-12
    if zero.any():
        a3 = np.where(zero, 1.0, A)[:, :, None]
    np.multiply(a3, L, out=W)  # u = a log x
    near = np.abs(W) < EXPM1_BELOW
    em1 = np.expm1(W, out=np.empty_like(W), where=near) if near.any() else None
    np.exp(W, out=W)
    W -= 1.0
    if em1 is not None:
        np.copyto(W, em1, where=near)
    W /= a3
    if zero.any():
        np.copyto(W, L, where=np.broadcast_to(zero[:, :, None], W.shape))


def power_w_stacked(logx: np.ndarray, A: np.ndarray, boxcox_form: bool) -> np.ndarray:
    """The power columns alone, W (F, n, k), of ``logx`` (n, k) at every row of powers
    ``A`` (F, k): element for element :func:`power_columns`' w(a) (:func:`_power_w_into`),
    without the derivative columns."""
    W = np.empty((A.shape[0], logx.shape[1], logx.shape[0]))
    with np.errstate(over="ignore", invalid="ignore"):
        _power_w_into(np.ascontiguousarray(logx.T)[None], A, boxcox_form, W)
    return np.swapaxes(W, 1, 2)


class _Folds:
    """The training problems of several folds, evaluated together.

    Fold f uses its training rows ``train[f]``, its response row ``Z[f]`` and its own powers.
    The fixed cross-products X_f'X_f and X_f'z of every fold are given (the column bank's
    fold Gram matrices: all rows minus the held-out rows) or computed once.  Each fold's
    training rows of X_f, log x and z are gathered once, column by column (folds with fewer
    training rows than the largest padded with rows of zeros, whose power columns are
    zeroed), so a trial forms the power columns on training rows only and three stacked
    products [W D]'[X_f], [W D]'[W D], [W D]'z give every fold's exact training sums (after
    the first step each fold has its own powers, so there is no shared all-rows product to
    downdate).  A trial's normal equations of [X_f, W, D] are factored once for all folds
    (column-scaled Cholesky with the condition check of ``fitting.solve_batch``); the
    leading block gives the fit on [X_f, W] (its RSS, from the residuals) and the whole the
    next Gauss-Newton step.  A fold that fails the check is solved by pivoted QR of its
    assembled training design, as in :class:`_Problem`.

    The folds of several candidates (each with its own fixed columns and powered
    predictors, all of the same sizes) are stacked the same way: ``Xf`` (C, n, p_f) and
    ``logx`` (C, n, k) hold every candidate's columns and ``owner[f]`` the candidate whose
    fold f is; without ``owner`` there is one candidate, ``Xf`` (n, p_f), ``logx`` (n, k).
    """

    def __init__(
        self,
        Z: np.ndarray,
        Xf: np.ndarray,
        logx: np.ndarray,
        train: list[np.ndarray],
        boxcox_form: bool,
        grams: np.ndarray | None,
        crosses: np.ndarray | None,
        owner: np.ndarray | None = None,
    ):
        F, n = Z.shape
        if owner is None:
            Xf, logx, owner = Xf[None], logx[None], np.zeros(F, dtype=np.intp)
        self.Xf, self.logx, self.owner, self.train, self.bc = Xf, logx, owner, train, boxcox_form
        self.pf, self.k = Xf.shape[2], logx.shape[2]
        self.Z = Z
        sizes = np.array([rows.size for rows in train], dtype=np.intp)
        m = int(sizes.max()) if F else 0
        self.pad: np.ndarray | None = None  # (F, m) True on padding rows, when there are any
        # (F, p_f, m), (F, k, m), (F, m): every fold's training rows, a column a row
        if np.all(sizes == n) and all(np.array_equal(rows, np.arange(n)) for rows in train):
            self.XT = np.ascontiguousarray(np.swapaxes(Xf, 1, 2)[owner])
            self.LT = np.ascontiguousarray(np.swapaxes(logx, 1, 2)[owner])
            self.Zt = np.ascontiguousarray(Z, dtype=float)
        else:
            rows_at = np.zeros((F, m), dtype=np.intp)
            pad = np.zeros((F, m), dtype=bool)
            for f, rows in enumerate(train):
                rows_at[f, : rows.size] = rows
                pad[f, rows.size :] = True
            at = (owner[:, None], rows_at)
            self.XT = np.ascontiguousarray(np.swapaxes(Xf[at], 1, 2))
            self.LT = np.ascontiguousarray(np.swapaxes(logx[at], 1, 2))
            self.Zt = Z[np.arange(F)[:, None], rows_at]
            if pad.any():
                self.pad = pad
                self.XT *= ~pad[:, None, :]
                self.LT *= ~pad[:, None, :]
                self.Zt[pad] = 0.0
        # [X_f z] of every fold's training rows side by side (F, p_f + 1, m): a trial's
        # cross-products of [W D] with both in one product
        self.XZ = np.concatenate([self.XT, self.Zt[:, None, :]], axis=1)
        self.XT, self.Zt = self.XZ[:, : self.pf], self.XZ[:, self.pf]
        if grams is None:
            grams = np.matmul(self.XT, np.swapaxes(self.XT, 1, 2))
        if crosses is None:
            crosses = np.matmul(self.XT, self.Zt[:, :, None])[:, :, 0]
        self.Gff, self.cf = grams, crosses

    def _xf(self, f: int) -> np.ndarray:
        """Fold f's fixed columns on all rows (n, p_f)."""
        out: np.ndarray = self.Xf[self.owner[f]]
        return out

    def assemble(
        self, idx: np.ndarray, A: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray, list[np.ndarray], np.ndarray, np.ndarray]:
        """Folds ``idx`` at powers ``A`` (Fa, k): the normal equations of [X_f, W, D] (G (Fa,
        P, P), c (Fa, P)), the blocks of power columns [W D] (Fa, 2k, b) of the training rows
        they were summed from, and whether W and D are finite (Fa,) each.

        Rows are taken in blocks of ``CHUNK_ROWS``: a block's columns and cross-products
        are formed while it is in cache."""
        F, m = self.Zt.shape
        k, pf = self.k, self.pf
        Fa = idx.size
        P = pf + 2 * k
        every = Fa == F  # idx is sorted and distinct: all folds, no copy
        SXz = np.zeros((Fa, 2 * k, pf + 1))
        SW = np.zeros((Fa, 2 * k, 2 * k))
        blocks: list[np.ndarray] = []
        with np.errstate(over="ignore", invalid="ignore"):
            for s in range(0, m, CHUNK_ROWS):
                sl = slice(s, s + CHUNK_ROWS)
                Lc = self.LT[:, :, sl] if every else self.LT[idx, :, sl]
                WD = np.empty((Fa, 2 * k, Lc.shape[2]))
                _power_columns_into(Lc, A, self.bc, WD[:, :k], WD[:, k:])
                if self.pad is not None:
                    WD *= ~(self.pad[:, None, sl] if every else self.pad[idx, None, sl])
                XZc = self.XZ[:, :, sl] if every else self.XZ[idx, :, sl]
                # einsum's own loops: for these small matrices faster than a stacked
                # matmul's call per matrix
                SXz += np.einsum("fib,fjb->fij", WD, XZc)
                SW += np.einsum("fib,fjb->fij", WD, WD)
                blocks.append(WD)
        # a column that is not finite makes its sum of squares not finite; a finite sum of
        # squares leaves no doubt (the elements are checked only where it is not)
        diag = np.diagonal(SW, axis1=1, axis2=2)
        wfin = np.all(np.isfinite(diag[:, :k]), axis=1)
        dfin = np.all(np.isfinite(diag[:, k:]), axis=1)
        for f in np.flatnonzero(~(wfin & dfin)):
            wfin[f] = all(np.all(np.isfinite(b[f, :k])) for b in blocks)
            dfin[f] = all(np.all(np.isfinite(b[f, k:])) for b in blocks)
        G = np.empty((Fa, P, P))
        G[:, :pf, :pf] = self.Gff[idx]
        G[:, pf:, :pf] = SXz[:, :, :pf]
        G[:, :pf, pf:] = np.swapaxes(SXz[:, :, :pf], 1, 2)
        G[:, pf:, pf:] = SW
        c = np.empty((Fa, P))
        c[:, :pf] = self.cf[idx]
        c[:, pf:] = SXz[:, :, pf]
        return G, c, blocks, wfin, dfin

    def residual_sums(
        self, idx: np.ndarray, blocks: list[np.ndarray], coef: np.ndarray
    ) -> np.ndarray:
        """Sum of squared residuals (Fa,) of folds ``idx`` on the first ``coef.shape[1]``
        columns of [X_f, W, D] (``blocks``: [W D] from :meth:`assemble` for these folds) with
        coefficients ``coef`` (Fa, q), from the residuals themselves."""
        pf = self.pf
        q = coef.shape[1]
        every = idx.size == self.Zt.shape[0]
        cf, cw = coef[:, :pf], coef[:, pf:]
        rss = np.zeros(idx.size)
        with np.errstate(over="ignore", invalid="ignore"):
            for j, s in enumerate(range(0, self.Zt.shape[1], CHUNK_ROWS)):
                sl = slice(s, s + CHUNK_ROWS)
                Xc = self.XT[:, :, sl] if every else self.XT[idx, :, sl]
                r = self.Zt[:, sl] if every else self.Zt[idx, sl]
                r = r - np.einsum("fi,fib->fb", cf, Xc)
                r -= np.einsum("fi,fib->fb", cw, blocks[j][:, : q - pf])
                rss += np.einsum("fb,fb->f", r, r)
        return rss

    def trial(
        self, idx: np.ndarray, A: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Folds ``idx`` at powers ``A`` (Fa, k): (rss (Fa,), coef of [X_f, W] (Fa, p_f + k),
        coef of [X_f, W, D] (Fa, p_f + 2k), qr (Fa,)).  rss is inf where a column or the fit
        is not finite; the last coefficients are NaN where there is no step (D not finite)
        or, with ``qr`` True, where the QR path (:meth:`qr_full`) is still to be taken."""
        k, pf = self.k, self.pf
        Fa = idx.size
        P, P1 = pf + 2 * k, pf + k
        G, c, blocks, wfin, dfin = self.assemble(idx, A)
        coef = np.full((Fa, P1), np.nan)
        g = np.full((Fa, P), np.nan)
        qr = np.zeros(Fa, dtype=bool)
        both = np.flatnonzero(wfin & dfin)
        if both.size:
            Bf, ok, B1 = solve_batch_nested(G[both], c[both], P1)
            g[both[ok]], coef[both[ok]] = Bf[ok], B1[ok]
            qr[both[~ok]] = True
        rest = np.flatnonzero(wfin & np.isnan(coef[:, 0]))
        if rest.size:
            with np.errstate(over="ignore", invalid="ignore"):
                B, ok = solve_batch(G[rest][:, :P1, :P1], c[rest][:, :P1])
                coef[rest[ok]] = B[ok]
                for i in rest[~ok]:
                    coef[i] = self._qr(int(idx[i]), A[i], with_d=False)
        rss = self.residual_sums(idx, blocks, coef)
        rss = np.where(wfin & np.isfinite(rss), rss, math.inf)
        return rss, coef, g, qr

    def _qr(self, f: int, a: np.ndarray, with_d: bool) -> np.ndarray:
        """Pivoted-QR coefficients of fold f's training design at powers ``a`` (NaN when
        it has no finite solution)."""
        rows = self.train[f]
        W, D = power_columns(self.logx[self.owner[f]][rows], a, self.bc)
        Xf = self._xf(f)[rows]
        design = np.hstack([Xf, W, D] if with_d else [Xf, W])
        try:
            coef, _, _ = qr_solve(design, self.Z[f, rows], with_condition=False)
        except CandidateFailure:
            return np.full(design.shape[1], np.nan)
        return coef if np.all(np.isfinite(coef)) else np.full(design.shape[1], np.nan)

    def qr_full(self, f: int, a: np.ndarray) -> np.ndarray:
        """Coefficients of [X_f, W, D] of fold f by pivoted QR (the condition check failed)."""
        with np.errstate(over="ignore", invalid="ignore"):
            return self._qr(f, a, with_d=True)


def _fold_inputs(
    z: np.ndarray, Xf: np.ndarray, x: np.ndarray, train: list[np.ndarray], labels: list[int] | None
) -> tuple[np.ndarray, np.ndarray, np.ndarray, list[int]]:
    """(z, X_f, log x, fold names) as float arrays, x as (n, k), after the checks every per-fold
    estimate makes: x > 0 and each fold's training rows more than its parameters + 1
    (a :class:`CandidateFailure` naming the fold, ``labels[f]``, default f + 1)."""
    z = np.asarray(z, dtype=float)
    x = np.asarray(x, dtype=float)
    Xf = np.asarray(Xf, dtype=float)
    if x.ndim == 1:
        x = x[:, None]
    names = labels if labels is not None else list(range(1, len(train) + 1))
    if np.any(x <= 0):
        raise CandidateFailure("an estimated power needs a predictor with values > 0")
    k, pf = x.shape[1], Xf.shape[1]
    for f, rows in enumerate(train):
        if rows.size <= pf + 2 * k + 1:
            raise CandidateFailure(
                f"fold {names[f]}: {rows.size} rows are too few to estimate {k} predictor power(s)"
            )
    return z, Xf, np.log(x), names


def estimate_fold_powers(
    z: np.ndarray,
    Xf: np.ndarray,
    x: np.ndarray,
    train: list[np.ndarray],
    start: np.ndarray,
    boxcox_form: bool = True,
    grams: np.ndarray | None = None,
    crosses: np.ndarray | None = None,
    labels: list[int] | None = None,
) -> list[PowerFit]:
    """:func:`estimate_powers` (``start`` given, no standard errors) on the training rows of
    every fold at once.

    ``z``: (n,) response, or (F, n) one row per fold; ``Xf`` (n, p_f) and ``x`` (n, k) on
    all rows; ``train[f]`` the training rows of fold f; ``grams`` (F, p_f, p_f) and
    ``crosses`` (F, p_f), when given, the folds' training X_f'X_f and X_f'z (e.g. downdated
    from all-rows sums).  Every fold starts from ``start`` (the all-rows estimate) and takes
    the same damped Gauss-Newton steps, with the same convergence rule, as
    :func:`estimate_powers`; the steps of all folds are taken together (one stacked
    factorisation per step and per halving).  A fold that does not converge goes to the same
    profile search.  Raises :class:`CandidateFailure` whose reason names the fold
    (``labels[f]``, default f + 1).
    """
    z, Xf, logx, names = _fold_inputs(z, Xf, x, train, labels)
    F, (n, k), pf = len(train), logx.shape, Xf.shape[1]
    Z = np.broadcast_to(z, (F, n)) if z.ndim == 1 else z
    folds = _Folds(Z, Xf, logx, train, boxcox_form, grams, crosses)
    steps = _damped_steps(folds.trial, folds.qr_full, F, pf, k, start)
    return [_settled(folds, steps, f, names[f]) for f in range(F)]


_Steps = tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]


def _settled(folds: _Folds, steps: _Steps, f: int, name: int) -> PowerFit:
    """Fold f's fit after the stacked steps: the iterate where it converged, else the
    started profile search on its training rows (:func:`_fallback`).  Raises
    :class:`CandidateFailure` naming the fold (``name``)."""
    a, rss, converged, its, _left = steps
    if converged[f]:
        return PowerFit(a[f].copy(), None, True, int(its[f]), "box_tidwell", float(rss[f]))
    rows = folds.train[f]
    prob = _Problem(
        folds.Z[f, rows], folds._xf(f)[rows], folds.logx[folds.owner[f]][rows], folds.bc
    )
    try:
        af, rf, method = _fallback(prob, a[f].copy(), float(rss[f]), False, int(its[f]), True)
    except CandidateFailure as exc:
        raise CandidateFailure(f"fold {name}: {exc.reason}") from None
    return PowerFit(af, None, True, int(its[f]), method, rf)


def estimate_many_powers(
    problems: list[tuple[np.ndarray, np.ndarray, np.ndarray]], boxcox_form: bool = True
) -> list[PowerFit | CandidateFailure]:
    """:func:`estimate_powers` (started at 1, with standard errors) for many candidates
    ``(z, X_f, x)`` on all their rows at once: per candidate its fit, or the
    :class:`CandidateFailure` that call would raise.

    Candidates with the same numbers of fixed columns and powers take their damped
    Gauss-Newton steps together (:class:`_Folds`, one problem per candidate with all rows
    as its training rows; the fit on [X_f, W] read from the leading block of the factor of
    [X_f, W, D], as the per-fold estimates do), each with the stopping rules of
    :func:`estimate_powers`; one that does not converge takes its whole-range profile
    search, and the standard errors are :func:`estimate_powers`' own.
    """
    out: list[PowerFit | CandidateFailure | None] = [None] * len(problems)
    groups: dict[tuple[int, int, int], list[int]] = {}
    inputs: dict[int, tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]] = {}
    for i, problem in enumerate(problems):
        try:
            inputs[i] = _inputs(*problem)
        except CandidateFailure as exc:
            out[i] = exc
            continue
        z, Xf, x, _logx = inputs[i]
        groups.setdefault((z.size, Xf.shape[1], x.shape[1]), []).append(i)
    for (n, pf, k), members in groups.items():
        every = np.arange(n)
        for s in range(0, len(members), max(1, STACK_CELLS // n)):
            part = members[s : s + max(1, STACK_CELLS // n)]
            folds = _Folds(
                np.stack([inputs[i][0] for i in part]),
                np.stack([inputs[i][1] for i in part]),
                np.stack([inputs[i][3] for i in part]),
                [every] * len(part),
                boxcox_form,
                None,
                None,
                np.arange(len(part)),
            )
            a, rss, conv, its, _left = _damped_steps(
                folds.trial, folds.qr_full, len(part), pf, k, np.ones(k)
            )
            settled: list[tuple[int, int, np.ndarray, float, str]] = []
            for f, i in enumerate(part):
                z, Xf, x, logx = inputs[i]
                prob = _Problem(z, Xf, logx, boxcox_form)
                try:
                    af, rf, method = _fallback(
                        prob, a[f].copy(), float(rss[f]), bool(conv[f]), int(its[f]), False
                    )
                except CandidateFailure as exc:
                    out[i] = exc
                    continue
                settled.append((f, i, af, rf, method))
            if not settled:
                continue
            at = np.array([f for f, *_r in settled])
            if at.size < len(part):  # the candidates that failed are left out of the stack
                folds = _Folds(
                    folds.Z[at],
                    folds.Xf[at],
                    folds.logx[at],
                    [every] * at.size,
                    boxcox_form,
                    None,
                    None,
                    np.arange(at.size),
                )
            ses = _std_errors_many(folds, np.stack([af for _f, _i, af, *_r in settled]), pf + 2 * k)
            for (f, i, af, rf, method), se in zip(settled, ses, strict=True):
                out[i] = PowerFit(
                    af, se, bool(conv[f]) or method == "profile", int(its[f]), method, rf
                )
    return [r for r in out if r is not None]


@dataclass(frozen=True)
class FoldPowerProblem:
    """One candidate's per-fold power estimates, as :func:`estimate_fold_powers` takes them:
    ``z`` (n,) or (F, n), ``Xf`` (n, p_f), ``x`` (n, k), ``train``, ``start`` (k,), and the
    folds' fixed cross-products ``grams`` (F, p_f, p_f) / ``crosses`` (F, p_f) when known."""

    z: np.ndarray
    Xf: np.ndarray
    x: np.ndarray
    train: list[np.ndarray]
    start: np.ndarray
    grams: np.ndarray | None = None
    crosses: np.ndarray | None = None
    labels: list[int] | None = None


def estimate_many_fold_powers(
    problems: list[FoldPowerProblem], boxcox_form: bool = True
) -> list[list[PowerFit] | CandidateFailure]:
    """:func:`estimate_fold_powers` for many candidates at once: per candidate its folds'
    fits, or the :class:`CandidateFailure` that call would raise.

    Candidates with the same numbers of fixed columns and powers are stepped together: the
    folds of all of them form one stack (:class:`_Folds` with an owner per fold), so every
    Gauss-Newton step and every halving is one stacked factorisation for all candidates x
    folds still moving, each (candidate, fold) with its own powers, damping, halving and
    stopping rules, and its own QR and profile fallbacks, exactly as one call per candidate
    takes them.
    """
    out: list[list[PowerFit] | CandidateFailure | None] = [None] * len(problems)
    ready: dict[
        tuple[int, int, int], list[tuple[int, np.ndarray, np.ndarray, np.ndarray, list[int]]]
    ]
    ready = {}
    for i, pr in enumerate(problems):
        try:
            z, Xf, logx, names = _fold_inputs(pr.z, pr.Xf, pr.x, pr.train, pr.labels)
        except CandidateFailure as exc:
            out[i] = exc
            continue
        size = (Xf.shape[1], logx.shape[1], Xf.shape[0])
        ready.setdefault(size, []).append((i, z, Xf, logx, names))
    chunks: list[tuple[int, int, list[tuple[int, np.ndarray, np.ndarray, np.ndarray, list[int]]]]]
    chunks = []
    for (pf, k, n), group in ready.items():
        cells = STACK_CELLS + 1  # a new stack for every size
        for m in group:  # at most STACK_CELLS fold rows in one stack (and one candidate at least)
            add = len(problems[m[0]].train) * n
            if cells + add > STACK_CELLS:
                chunks.append((pf, k, []))
                cells = 0
            chunks[-1][2].append(m)
            cells += add
    for pf, k, members in chunks:
        n = members[0][2].shape[0]
        F = [len(problems[i].train) for i, *_ in members]
        owner = np.repeat(np.arange(len(members)), F)
        Z = np.concatenate(
            [np.broadcast_to(z, (f, n)) for (_, z, *_r), f in zip(members, F, strict=True)]
        )
        train = [rows for i, *_ in members for rows in problems[i].train]
        grams = crosses = None
        if all(problems[i].grams is not None for i, *_ in members):
            grams = np.concatenate([problems[i].grams for i, *_ in members])
        if all(problems[i].crosses is not None for i, *_ in members):
            crosses = np.concatenate([problems[i].crosses for i, *_ in members])
        starts = np.concatenate(
            [
                np.broadcast_to(np.asarray(problems[i].start, float), (f, k))
                for (i, *_r), f in zip(members, F, strict=True)
            ]
        )
        folds = _Folds(
            Z,
            np.stack([m[2] for m in members]),
            np.stack([m[3] for m in members]),
            train,
            boxcox_form,
            grams,
            crosses,
            owner,
        )
        steps = _damped_steps(folds.trial, folds.qr_full, owner.size, pf, k, starts)
        first = 0
        for (i, _z, _Xf, _L, names), f_count in zip(members, F, strict=True):
            try:
                out[i] = [_settled(folds, steps, first + f, names[f]) for f in range(f_count)]
            except CandidateFailure as exc:
                out[i] = exc
            first += f_count
    return [r for r in out if r is not None]


# (rss, coef of [X_f, W], coef of [X_f, W, D], qr) of folds ``idx`` at powers (len(idx), k)
_Trial = Callable[[np.ndarray, np.ndarray], tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]]


def _damped_steps(
    trial: _Trial,
    full: Callable[[int, np.ndarray], np.ndarray] | None,
    F: int,
    pf: int,
    k: int,
    start: np.ndarray,
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """The damped Gauss-Newton iteration of :func:`estimate_powers` for F folds at once:
    (powers (F, k), rss (F,), converged, iterations, left).

    ``start``: (k,) for every fold, or (F, k) one row per fold.  ``trial(idx, A)``
    evaluates folds ``idx`` at powers ``A``; ``full(f, a)`` gives fold f's
    coefficients of [X_f, W, D] where ``trial`` flagged it (``qr``).  Without ``full`` a
    flagged fold leaves at once: it is ``left`` (neither converged nor stepped further),
    for the caller to settle by another path."""
    a = np.broadcast_to(np.clip(np.asarray(start, float), *POWER_BOUNDS), (F, k)).copy()
    rss, coef, g, qr = trial(np.arange(F), a)
    converged = np.zeros(F, dtype=bool)
    left = qr.copy() if full is None else np.zeros(F, dtype=bool)
    its = np.zeros(F, dtype=int)
    flat = np.zeros(F, dtype=int)  # consecutive steps that lowered the RSS by <= FTOL
    a_prev = np.full((F, k), np.nan)  # every fold's last iterate and its step
    s_prev = np.full((F, k), np.nan)
    active = np.isfinite(rss) & ~left
    for it in range(1, MAX_ITER + 1):
        idx = np.flatnonzero(active)
        if idx.size == 0:
            break
        its[idx] = it
        if full is not None:
            for f in idx[qr[idx]]:
                g[f], qr[f] = full(int(f), a[f]), False
        b = coef[idx, pf:]
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            step = g[idx, pf + k :] / b
        bad = (
            np.any(~np.isfinite(g[idx]), axis=1)
            | np.any(np.abs(b) < 1e-300, axis=1)
            | np.any(~np.isfinite(step), axis=1)
        )
        active[idx[bad]] = False  # no step: not converged, the profile search takes over
        srch = idx[~bad]
        ext = _extrapolated(a[srch], step[~bad], a_prev[srch], s_prev[srch])
        a_prev[srch], s_prev[srch] = a[srch], step[~bad]
        st = np.clip(step[~bad], -1.0, 1.0)  # at most one rung of the ladder per step
        first = np.isfinite(ext[:, 0])  # the extrapolated step is tried first
        while srch.size:
            big = np.max(np.abs(st), axis=1) >= TOL
            # no decrease within TOL of a: stationary to that accuracy (see estimate_powers)
            converged[srch[~big]] = True
            active[srch[~big]] = False
            srch, st, first, ext = srch[big], st[big], first[big], ext[big]
            if srch.size == 0:
                break
            move = np.where(first[:, None], np.clip(ext, -1.0, 1.0), st)
            a_new = np.clip(a[srch] + move, *POWER_BOUNDS)
            rss_new, coef_new, g_new, qr_new = trial(srch, a_new)
            if full is None and np.any(qr_new):  # these folds leave at once
                left[srch[qr_new]] = True
                active[srch[qr_new]] = False
                keep = ~qr_new
                srch, st, a_new = srch[keep], st[keep], a_new[keep]
                first, ext = first[keep], ext[keep]
                rss_new, coef_new, g_new = rss_new[keep], coef_new[keep], g_new[keep]
                qr_new = qr_new[keep]
            acc = rss_new <= rss[srch] * (1.0 + 1e-12)
            if np.any(acc):
                i = srch[acc]
                moved = np.max(np.abs(a_new[acc] - a[i]), axis=1)
                flat[i] = np.where(rss[i] - rss_new[acc] <= FTOL * rss[i], flat[i] + 1, 0)
                a[i], rss[i], coef[i] = a_new[acc], rss_new[acc], coef_new[acc]
                g[i], qr[i] = g_new[acc], qr_new[acc]
                done = (moved < TOL) | (flat[i] >= 2)
                converged[i[done]] = True
                active[i[done]] = False
            # a rejected extrapolation is followed by the whole Gauss-Newton step, a
            # rejected Gauss-Newton step by its half
            srch, st = srch[~acc], np.where(first[~acc, None], st[~acc], st[~acc] / 2.0)
            first, ext = np.zeros(srch.size, dtype=bool), ext[~acc]
    return a, rss, converged, its, left


# ------------------------------------------- every training fold from series cross-products
SERIES_TOL = 2.0**-53  # truncation bound of the power columns' series, relative
SERIES_MAX_ORDER = 24  # a radius needing a longer series goes to the exact path
RADIUS_STEPS = 2.0  # radius: this many times the largest first step of a fold ...
RADIUS_SE = 3.0  # ... plus this many all-rows standard errors of the power


def series_order(r: float) -> int | None:
    """The smallest M with r^(M+1) / (M+1)! * e^(2r) <= SERIES_TOL, or None above
    ``SERIES_MAX_ORDER``: the truncation bound of :class:`_Series` at reach r = |a - c| max|log x|."""
    if not r < 10.0:  # far beyond the longest series (also NaN): refused, no overflow
        return None
    term = r * math.exp(2.0 * r)  # r^(M+1)/(M+1)! e^(2r) at M = 0
    for m in range(SERIES_MAX_ORDER + 1):
        if term <= SERIES_TOL:
            return m
        term *= r / (m + 2)
    return None


def _series_basis(
    L: np.ndarray, c: np.ndarray, h: np.ndarray, origin: np.ndarray, m1: int, bc: bool
) -> np.ndarray:
    """Scaled Taylor columns (k m1, b), one row per column: row j m1 + m holds
    h_j^m / m! d^m w_j / da^m at a = c_j, for the rows' log x ``L`` (b, k); ``origin[j]``:
    c_j = 0 in the Box-Cox form."""
    b, k = L.shape
    out = np.empty((k * m1, b))
    for j in range(k):
        Lj, cj, hj = L[:, j], float(c[j]), float(h[j])
        hL = hj * Lj
        rows = out[j * m1 : (j + 1) * m1]
        if bc and origin[j]:  # w(a) = sum_m a^m L^(m+1) / (m+1)!
            rows[0] = Lj
            for m in range(1, m1):
                np.multiply(rows[m - 1], hL, out=rows[m])
                rows[m] *= 1.0 / (m + 1)
            continue
        p = np.exp(cj * Lj)  # x^c (hL)^m / m!
        if not bc:
            rows[0] = p
            for m in range(1, m1):
                np.multiply(rows[m - 1], hL, out=rows[m])
                rows[m] *= 1.0 / m
            continue
        # (a w)^(m) = x^a L^m: B_m = (x^c (hL)^m/m! - h B_(m-1)) / c, scaled; the rounding
        # of B_0 reaches w(a) times (-(a - c)/c)^m, harmless for |a - c| <= |c| / 2
        np.divide(np.expm1(cj * Lj), cj, out=rows[0])
        for m in range(1, m1):
            p *= hL
            p *= 1.0 / m
            np.multiply(rows[m - 1], -hj, out=rows[m])
            rows[m] += p
            rows[m] *= 1.0 / cj
    return out


class _Held:
    """The rows grouped by the fold that holds them out (folds whose held-out rows do not
    overlap), copied once in that order, and the training cross-products of columns built
    from them: all rows' sums minus each fold's held-out sums (O(n q^2) per call, whatever
    the number of folds)."""

    def __init__(self, held: list[np.ndarray], z: np.ndarray, Xf: np.ndarray, logx: np.ndarray):
        n, F = z.size, len(held)
        rest = np.ones(n, dtype=bool)
        for rows in held:
            rest[rows] = False
        groups = [*held, np.flatnonzero(rest)]
        perm = np.concatenate(groups)
        self.bounds = np.concatenate([[0], np.cumsum([g.size for g in groups])])
        self.z, self.Xf, self.logx = z[perm], Xf[perm], logx[perm]
        self.XfT = np.ascontiguousarray(self.Xf.T)  # (p_f, n): blocks of columns copied whole
        self.F = F

    def grams(
        self, columns: Callable[[slice], np.ndarray], q: int
    ) -> tuple[np.ndarray, np.ndarray] | None:
        """(all rows (q, q), training rows of every fold (F, q, q)) of ``columns(rows)``
        ((q, b), one row per column), or None when a value is not finite (its square on the
        diagonal is then not finite either)."""
        held = np.zeros((self.F + 1, q, q))
        for f in range(self.F + 1):
            for s in range(int(self.bounds[f]), int(self.bounds[f + 1]), CHUNK_ROWS):
                T = columns(slice(s, min(s + CHUNK_ROWS, int(self.bounds[f + 1]))))
                held[f] += T @ T.T
        total = held.sum(axis=0)
        if not np.all(np.isfinite(np.diagonal(held, axis1=1, axis2=2))):
            return None
        return total, total[None] - held[: self.F]


class _Series:
    """The training problems of folds whose held-out rows do not overlap, evaluated from
    cross-products computed once: no trial touches the rows.

    Predictor j's column and its derivative at a are Taylor series about c_j (the start
    a0_j, or 0 in the Box-Cox form when |a0_j| < 2 rho_j: the basis about c_j is built by a
    recurrence in 1/c_j): w_j(a) = sum_m B_jm delta^m, dw_j/da = sum_m (m+1) B_j,m+1
    delta^m / h_j, delta = (a - c_j)/h_j in [-1, 1], h_j the radius about c_j (rho_j, or
    |a0_j| + rho_j about 0), B_jm = h_j^m/m! w_j^(m)(c_j), m = 0 .. M + 1.  With
    r = max_j h_j max|log x_j| the remainder of each column is at most
    r^(M+1)/(M+1)! e^(2r) of its value, row by row (the tail of exp(d L t) in
    w(a) = L int_0^1 exp(a L t) dt, or of exp(d L) in x^a, is at most (rt)^(M+1)/(M+1)!
    e^(rt) of the term kept, and the column at c is within e^r of the one at a);
    :func:`series_order` puts it below 2^-53, the rounding of the columns themselves.

    The columns are those of x / s, s = exp(mid-range of log x_j), when that leaves the
    problem unchanged: (x/s)^a = s^-a x^a spans the same columns beside X_f, and with Q =
    x^a log x the pair [x^a, Q] becomes s^-a [x^a, Q - log(s) x^a], so the RSS at every a
    and the Gauss-Newton step gamma / b of the plain form are the same; the Box-Cox form
    spans the same columns as the plain one when X_f holds a constant column, and its step
    is the plain one (w = (P - 1)/a, dw/da = Q/a - w/a give gamma = a gamma_Q and
    b = a b_P).  Without a constant column the Box-Cox form keeps log x itself.

    The response enters centred on the all-rows fit at the start, zt = z - X_f beta0 -
    W(a0) b0 (W(a0) from the same series), so the fit of z on [X_f, W(a)] is
    (beta0, b0) plus that of e(a) = zt + (W(a0) - W(a)) b0, and the RSS is
    e'e - e'A (A'A)^-1 A'e with every term of residual size: it keeps the digits that
    z'z - c'b loses when R^2 is near 1, and the RSS comparisons of the iteration
    (a decrease, the 1e-12 relative-decrease stop) see the same numbers as from residuals
    to about 1e-14.  The cross-products of [X_f, zt, B] are summed once (``_Held.grams``,
    q = p_f + 1 + k (M + 2)); a trial assembles G = U' C_f U, U the linear map from those
    columns to [X_f, W, D, e], in O(q^2 (p_f + 2k)) for each fold.  A trial leaves the path
    (``qr`` in its answer) when it lies outside the radius, its scaled normal equations fail
    the condition check of ``fitting.solve_batch`` (QR would be needed) or its RSS is not
    clearly above the rounding of e'e.
    """

    def __init__(
        self,
        rows: _Held,
        start: np.ndarray,
        beta: np.ndarray,
        bc: bool,
        rho: np.ndarray,
    ):
        k = rows.logx.shape[1]
        pf = rows.Xf.shape[1]
        self.pf, self.k, self.bc, self.beta = pf, k, bc, beta
        self.origin = bc & (np.abs(start) < 2.0 * rho)
        self.c = np.where(self.origin, 0.0, start)
        self.h = np.where(self.origin, np.abs(start) + rho, rho)
        r = float(np.max(self.h * np.max(np.abs(rows.logx), axis=0)))
        order = series_order(r)
        self.ok = order is not None
        if order is None:
            return
        self.m1 = order + 2  # basis columns per predictor (orders 0 .. M + 1)
        d0 = (start - self.c) / self.h
        self.w0 = d0[:, None] ** np.arange(self.m1)  # W(a0) = sum_m B_m d0^m
        self.q = pf + 1 + k * self.m1
        self.rows = rows
        sums = rows.grams(self._columns, self.q)
        self.ok = sums is not None
        if sums is not None:
            self.C = sums[1]

    def _columns(self, sl: slice) -> np.ndarray:
        """[X_f, zt, B] of the rows ``sl`` (q, b)."""
        rows, pf, k, m1 = self.rows, self.pf, self.k, self.m1
        L = rows.logx[sl]
        T = np.empty((self.q, L.shape[0]))
        T[:pf] = rows.XfT[:, sl]
        B = _series_basis(L, self.c, self.h, self.origin, m1, self.bc)
        T[pf + 1 :] = B
        if self.origin.any():
            W0 = np.zeros(L.shape[0])
            for j in range(k):
                W0 += self.beta[pf + j] * (self.w0[j] @ B[j * m1 : (j + 1) * m1])
        else:  # about the start: W(a0) = B_0
            W0 = self.beta[pf:] @ B[::m1]
        T[pf] = rows.z[sl] - self.beta[:pf] @ T[:pf] - W0
        return T

    def trial(
        self, idx: np.ndarray, A: np.ndarray
    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
        """Folds ``idx`` at powers ``A``, as :meth:`_Folds.trial`; ``qr`` marks the folds
        that leave this path (their values are inf / NaN)."""
        pf, k, m1 = self.pf, self.k, self.m1
        Fa = idx.size
        P1, P = pf + k, pf + 2 * k
        delta = (A - self.c) / self.h  # (Fa, k)
        inside = np.all(np.abs(delta) <= 1.0, axis=1)
        pw = np.clip(delta, -1.0, 1.0)[:, :, None] ** np.arange(m1)  # (Fa, k, m1)
        U = np.zeros((Fa, self.q, P + 1))
        U[:, np.arange(pf), np.arange(pf)] = 1.0
        U[:, pf, P] = 1.0
        b0 = self.beta[pf:]
        for j in range(k):
            at = pf + 1 + j * m1 + np.arange(m1)
            U[:, at, pf + j] = pw[:, j, :]
            U[:, at[1:], pf + k + j] = pw[:, j, :-1] * (np.arange(1, m1) / self.h[j])
            U[:, at, P] = b0[j] * (self.w0[j][None, :] - pw[:, j, :])
        G = np.matmul(np.swapaxes(U, 1, 2), np.matmul(self.C[idx], U))
        G = 0.5 * (G + np.swapaxes(G, 1, 2))
        Bf, ok, B1 = solve_batch_nested(G[:, :P, :P], G[:, :P, P], P1)
        ee = G[:, P, P]
        rss = ee - np.einsum("fi,fi->f", B1, G[:, :P1, P])
        good = inside & ok & (rss > 1e-3 * ee)
        rss = np.where(good, rss, math.inf)
        coef = np.where(good[:, None], B1 + self.beta, np.nan)
        g = np.where(good[:, None], Bf + np.concatenate([self.beta, np.zeros(k)]), np.nan)
        return rss, coef, g, ~good


def estimate_fold_powers_by_series(
    z: np.ndarray,
    Xf: np.ndarray,
    x: np.ndarray,
    train: list[np.ndarray],
    start: np.ndarray,
    boxcox_form: bool = True,
    labels: list[int] | None = None,
    radius: np.ndarray | None = None,
) -> list[PowerFit]:
    """:func:`estimate_fold_powers` for folds whose held-out rows do not overlap (one
    repeat's folds) and one response ``z`` (n,), with steps whose cost does not grow with
    the rows (:class:`_Series`); a response per fold (F, n) takes the exact path.

    Every fold takes the same damped Gauss-Newton steps, with the same stopping rules, as
    :func:`estimate_powers` started at ``start``; a fold that leaves the series path (a
    trial outside the radius, a step that needs QR, no convergence) is estimated by
    :func:`estimate_powers` on its training rows, the exact path with its profile
    fallback, as are all folds when held-out rows overlap, ``z`` is not finite or the
    radius needs a series longer than ``SERIES_MAX_ORDER``.  The radius rho_j about the
    start is ``RADIUS_STEPS`` times the largest first step of any fold plus ``RADIUS_SE``
    all-rows standard errors of the power at the start, or ``radius`` when given.  The
    RSS reported is the series path's (see :class:`_Series`).
    """
    z, Xf, logx, names = _fold_inputs(z, Xf, x, train, labels)
    F, (n, k), pf = len(train), logx.shape, Xf.shape[1]
    start = np.clip(np.asarray(start, float), *POWER_BOUNDS)
    held: list[np.ndarray] = []
    for rows in train:
        out_f = np.ones(n, dtype=bool)
        out_f[rows] = False
        held.append(np.flatnonzero(out_f))
    left = np.ones(F, dtype=bool)
    fits: list[PowerFit | None] = [None] * F
    times_held = np.bincount(np.concatenate(held), minlength=n) if F else np.zeros(n)
    if z.ndim == 1 and np.all(times_held <= 1) and np.all(np.isfinite(z)):
        # log x about its mid-range: x scaled by a constant leaves the RSS and the steps
        # unchanged (see _Series), and it shortens the series
        constant = np.any((np.ptp(Xf, axis=0) == 0) & (Xf[0] != 0)) if n else False
        mid = (logx.min(axis=0) + logx.max(axis=0)) / 2 if constant or not boxcox_form else 0.0
        grouped = _Held(held, z, Xf, logx - mid)
        first = _first_steps(grouped, start, boxcox_form)
        if first is not None:
            beta, rho = first
            if radius is not None:
                rho = np.broadcast_to(np.asarray(radius, float), (k,))
            ser = _Series(grouped, start, beta, boxcox_form, rho)
            if ser.ok:
                a, rss, conv, its, _ = _damped_steps(ser.trial, None, F, pf, k, start)
                for i in np.flatnonzero(conv):
                    fits[i] = PowerFit(
                        a[i].copy(), None, True, int(its[i]), "box_tidwell", float(rss[i])
                    )
                left = ~conv
    out: list[PowerFit] = []
    for f in range(F):
        fit = fits[f]
        if left[f]:
            rows = train[f]
            zf = z[rows] if z.ndim == 1 else z[f, rows]
            try:
                fit = estimate_powers(
                    zf, Xf[rows], x[rows], start=start, boxcox_form=boxcox_form, with_se=False
                )
            except CandidateFailure as exc:
                raise CandidateFailure(f"fold {names[f]}: {exc.reason}") from None
        assert fit is not None
        out.append(fit)
    return out


def _first_steps(rows: _Held, start: np.ndarray, bc: bool) -> tuple[np.ndarray, np.ndarray] | None:
    """(beta0 (p_f + k,), rho (k,)) from the cross-products of [X_f, W, D, z] at the start
    (one pass): beta0 the all-rows fit on [X_f, W]; rho = ``RADIUS_STEPS`` x the largest
    first Gauss-Newton step of any fold + ``RADIUS_SE`` all-rows standard errors of the
    power.  None when a fit, step or standard error is not finite or a scaled system fails
    the condition check (the exact path then takes every fold)."""
    n, k = rows.logx.shape
    pf = rows.Xf.shape[1]
    p = pf + 2 * k

    def columns(sl: slice) -> np.ndarray:
        W, D = power_columns(rows.logx[sl], start, bc)
        T = np.empty((p + 1, W.shape[0]))
        T[:pf], T[pf : pf + k], T[pf + k : p], T[p] = rows.Xf[sl].T, W.T, D.T, rows.z[sl]
        return T

    with np.errstate(over="ignore", invalid="ignore"):
        sums = rows.grams(columns, p + 1)
    if sums is None:
        return None
    G = np.concatenate([sums[0][None], sums[1]])  # all rows, then each fold
    Bf, ok, B1 = solve_batch_nested(G[:, :p, :p], G[:, :p, p], pf + k)
    if not np.all(ok):
        return None
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        steps = Bf[:, pf + k :] / B1[:, pf:]
        rss = G[0, p, p] - Bf[0] @ G[0, :p, p]
        cov = np.linalg.inv(G[0, :p, :p])
        se = np.sqrt(max(rss, 0.0) / (n - p) * np.diag(cov)[pf + k :]) / np.abs(B1[0, pf:])
    rho = RADIUS_STEPS * np.max(np.abs(steps), axis=0) + RADIUS_SE * se
    if not (np.all(np.isfinite(rho)) and np.all(rho > 0) and np.all(np.isfinite(B1[0]))):
        return None
    return B1[0], rho
