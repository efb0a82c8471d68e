"""Profile likelihood of a response transformation in a linear model.

For Box-Cox (Box & Cox 1964) the profile log-likelihood of lambda with beta and
sigma maximised out is

    l_P(lambda) = -(n/2) [log(2 pi) + 1 + log(RSS(lambda)/n)] + (lambda - 1) sum log y_i

where RSS(lambda) comes from regressing the transformed response on the whole
design ``X`` (not on a constant alone, which is what scipy's ``boxcox`` does).
We evaluate it in the geometric-mean scaled form (Montgomery, Peck & Vining,
*Introduction to Linear Regression Analysis*, section 5.4.1), which avoids the
overflow of ``y**lambda`` for large ``y``.  Yeo-Johnson (2000) uses the same
formula with its own Jacobian ``(lambda - 1) sum sign(y) log(1 + |y|)``.

The 95% interval is the likelihood-ratio set {lambda : l_P >= max - chi2_1(0.95)/2}.
"""

from __future__ import annotations

import math
import warnings
from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np
from scipy import optimize, special

from . import sources as src
from . import transforms as tr

LAMBDA_BOUNDS = (-3.0, 3.0)
CI_SEARCH = 5.0


@dataclass(frozen=True)
class LambdaEstimate:
    family: str
    lam: float
    llf: float  # profile log-likelihood on the original y scale at lam
    ci_low: float | None  # None: the interval runs past -CI_SEARCH
    ci_high: float | None
    level: float
    ladder: float | None  # nearest ladder power inside the interval
    lr_p_identity: float | None  # LR test of lambda = 1
    lr_p_log: float | None  # LR test of lambda = 0
    at_bound: bool
    per_fold: tuple[float, ...] | None = None  # the re-estimates in the training folds, if made

    @property
    def source(self) -> str:
        """How the estimate and its interval were found (the family's method)."""
        return src.LAMBDA.get(self.family, self.family)


class _Projector:
    """Residual sums of squares against a fixed design.

    From the Cholesky factor of the column-scaled X'X when it is well conditioned
    (condition number below 1e8): rss = z'z - c'G^-1 c with c = X'z, one pass over X
    per call.  The subtraction loses about eps * z'z / rss relative accuracy, so when
    that could exceed 1e-9 (an almost perfect fit) the residual is formed from the thin
    QR of X instead, as it is for an ill-conditioned or rank-deficient X.
    """

    def __init__(self, X: np.ndarray | None, n: int, gram: np.ndarray | None = None):
        if X is None:
            X = np.ones((n, 1))
            gram = None
        if gram is not None and not np.all(np.isfinite(gram)):
            gram = None  # sums that overflowed: form them from the rows
        # Scale columns: the column space is unchanged, this only helps accuracy.
        if gram is None:
            scale = np.sqrt(np.sum(X * X, axis=0))
        else:  # X'X given (a training fold's, downdated from all-rows sums)
            scale = np.sqrt(np.maximum(np.diagonal(gram), 0.0))
        scale[scale == 0] = 1.0
        self.X = X
        self.scale = scale
        self.L: np.ndarray | None = None
        self.q: np.ndarray | None = None
        G = (X.T @ X if gram is None else gram) / np.outer(scale, scale)
        ev = np.linalg.eigvalsh(G)
        if ev[0] > 1e-8 * ev[-1]:
            try:
                self.L = np.asfortranarray(np.linalg.cholesky(G))
            except np.linalg.LinAlgError:
                self.L = None
        if self.L is None and gram is not None:  # the QR path scales by the rows, as without
            self.scale = np.sqrt(np.sum(X * X, axis=0))
            self.scale[self.scale == 0] = 1.0
        ones = np.ones(n)
        if self.L is not None:
            c = self._coef_rhs(X.sum(axis=0))
            res_ones = n - float(c @ c)
            self.has_const = bool(res_ones < 1e-12 * n)
        else:
            q = self._qr()
            res = ones - q @ (q.T @ ones)
            self.has_const = bool(np.linalg.norm(res) < 1e-8 * math.sqrt(n))

    def _qr(self) -> np.ndarray:
        if self.q is None:
            q, r = np.linalg.qr(self.X / self.scale)
            keep = np.abs(np.diag(r)) > 1e-10 * max(1.0, float(np.max(np.abs(np.diag(r)))))
            self.q = q[:, keep]
        return self.q

    def _coef_rhs(self, xz: np.ndarray) -> np.ndarray:
        """L^-1 (X'z scaled): its squared norm is the explained sum of squares."""
        assert self.L is not None  # only called when the Cholesky factor exists
        return np.linalg.solve(self.L, xz / self.scale)

    def rss(self, z: np.ndarray) -> float:
        if self.L is not None:
            zz = float(z @ z)
            c = self._coef_rhs(self.X.T @ z)
            rss = zz - float(c @ c)
            if rss > 1e-7 * zz:  # eps * zz / rss <= 2.2e-9: the subtraction is accurate
                return rss
        q = self._qr()
        r = z - q @ (q.T @ z)
        return float(r @ r)


def _scaled_box_cox(logy: np.ndarray, proj: _Projector) -> Callable[[float], float]:
    """Box-Cox profile llf (Jacobian included) in the geometric-mean form, from log y."""
    n = logy.size
    lgm = float(np.mean(logy))
    gm = math.exp(lgm)
    w = logy - lgm

    def llf(lam: float) -> float:
        with np.errstate(over="ignore", invalid="ignore"):
            if abs(lam) < 1e-12:
                z = gm * w
            else:
                z = gm * np.expm1(lam * w) / lam
                if not proj.has_const:
                    z = z - gm * math.expm1(-lam * lgm) / lam
        if not np.all(np.isfinite(z)):
            return -math.inf
        rss = proj.rss(z)
        if not rss > 0:
            return -math.inf
        return -0.5 * n * (math.log(2 * math.pi) + 1 + math.log(rss / n))

    return llf


def _profile(family: str, y: np.ndarray, proj: _Projector) -> Callable[[float], float]:
    n = y.size
    if family == "box_cox":
        return _scaled_box_cox(np.log(y), proj)
    if family == "yeo_johnson" and np.all(y >= 0):
        # Yeo-Johnson of y >= 0 is Box-Cox of 1 + y (same Jacobian): the scaled form avoids
        # the cancellation in ((1 + y)^lambda - 1)/lambda for large y and negative lambda.
        return _scaled_box_cox(np.log1p(y), proj)
    if family == "yeo_johnson" and np.all(y < 0):
        # ... and of y < 0 it is minus Box-Cox of 1 - y at 2 - lambda (same RSS and Jacobian).
        bc = _scaled_box_cox(np.log1p(-y), proj)
        return lambda lam: bc(2.0 - lam)
    if family == "yeo_johnson":
        jac_base = float(np.sum(np.sign(y) * np.log1p(np.abs(y))))

        def llf(lam: float) -> float:
            with np.errstate(over="ignore", invalid="ignore"):
                z = tr.yeo_johnson_map(y, lam)
            if not np.all(np.isfinite(z)):
                return -math.inf
            rss = proj.rss(z)
            if not rss > 0:
                return -math.inf
            return -0.5 * n * (math.log(2 * math.pi) + 1 + math.log(rss / n)) + (lam - 1) * jac_base

        return llf
    raise ValueError(family)


def profile_loglik(family: str, y: np.ndarray, X: np.ndarray | None, lam: float) -> float:
    """l_P(lambda) on the original y scale (including the Jacobian)."""
    return _profile(family, np.asarray(y, float), _Projector(X, len(y)))(lam)


def estimate_lambda(
    family: str,
    y: np.ndarray,
    X: np.ndarray | None = None,
    level: float = 0.95,
    with_interval: bool = True,
    near: float | None = None,
    gram: np.ndarray | None = None,
) -> LambdaEstimate:
    """Maximum-likelihood lambda of a Box-Cox or Yeo-Johnson response in the model y(lambda) ~ X.

    ``y``: (n,) response (> 0 for Box-Cox); ``X``: (n, p) design or ``None`` for a
    constant only.  Grid over [-3, 3] then bounded Brent refinement; the
    likelihood-ratio interval end points by ``brentq`` out to +-5.  ``near``
    (e.g. the estimate on all rows, when re-estimating inside a fold) starts
    with a finer grid of +-1 around it; if the best grid point falls on that
    grid's edge the whole range is searched.  ``gram``: X'X when it is at hand (a training
    fold's, all-rows sums minus the held-out rows), so it is not formed from the rows again.
    """
    y = np.asarray(y, dtype=float)
    proj = _Projector(X, y.size, gram)
    f = _profile(family, y, proj)
    grid: np.ndarray | None = None
    vals: np.ndarray | None = None
    if near is not None and math.isfinite(near):
        # a bracket around the warm start first: three evaluations when it holds the maximum
        trio = np.clip(np.array([near - 0.25, near, near + 0.25]), *LAMBDA_BOUNDS)
        tv = np.array([f(g) for g in trio])
        if np.all(np.isfinite(tv)) and tv[1] >= tv[0] and tv[1] >= tv[2] and trio[0] < trio[2]:
            grid, vals = trio, tv
    if grid is None and near is not None and math.isfinite(near):
        grid = np.clip(np.linspace(near - 1.0, near + 1.0, 9), *LAMBDA_BOUNDS)
        vals = np.array([f(g) for g in grid])
        i = int(np.argmax(np.where(np.isfinite(vals), vals, -np.inf)))
        if not np.isfinite(vals[i]) or (
            i in (0, grid.size - 1) and LAMBDA_BOUNDS[0] < grid[i] < LAMBDA_BOUNDS[1]
        ):
            grid = None
    if grid is None:
        grid = np.linspace(LAMBDA_BOUNDS[0], LAMBDA_BOUNDS[1], 25)
        vals = np.array([f(g) for g in grid])
    assert vals is not None  # set together with grid
    if not np.any(np.isfinite(vals)):
        raise ValueError("the profile likelihood is not finite anywhere on [-3, 3]")
    i = int(np.nanargmax(np.where(np.isfinite(vals), vals, -np.inf)))
    lo = grid[max(i - 1, 0)]
    hi = grid[min(i + 1, grid.size - 1)]
    res = optimize.minimize_scalar(
        lambda t: -f(t), bounds=(lo, hi), method="bounded", options={"xatol": 1e-9}
    )
    lam = float(res.x)
    best = -float(res.fun)
    if vals[i] > best:
        lam, best = float(grid[i]), float(vals[i])
    at_bound = bool(lam <= LAMBDA_BOUNDS[0] + 1e-6 or lam >= LAMBDA_BOUNDS[1] - 1e-6)
    ci_low = ci_high = None
    if with_interval:
        cut = best - _chi2_1_ppf(level) / 2.0

        def g(t: float) -> float:
            v = f(t)
            return (v if math.isfinite(v) else -1e300) - cut

        with warnings.catch_warnings():
            # brentq never warns, but profile evaluations near overflow may.
            warnings.simplefilter("ignore", RuntimeWarning)
            ci_low = _endpoint(g, lam, -CI_SEARCH)
            ci_high = _endpoint(g, lam, CI_SEARCH)

    def lr_p(l0: float) -> float | None:
        if not with_interval:  # a fold's warm-started estimate: only lambda is used
            return None
        v = f(l0)
        if not math.isfinite(v):
            return None
        return float(special.erfc(math.sqrt(max(2.0 * (best - v), 0.0) / 2.0)))

    ladder = None
    lo_b = -math.inf if ci_low is None else ci_low
    hi_b = math.inf if ci_high is None else ci_high
    inside = [p for p in tr.LADDER if lo_b <= p <= hi_b]
    if inside:
        ladder = min(inside, key=lambda p: (abs(p - lam), abs(p)))
    return LambdaEstimate(
        family, lam, best, ci_low, ci_high, level, ladder, lr_p(1.0), lr_p(0.0), at_bound
    )


def _chi2_1_ppf(level: float) -> float:
    """chi-square(1) quantile: the square of the standard normal (1 + level)/2 quantile."""
    return float(special.ndtri(0.5 + level / 2.0) ** 2)


def _endpoint(g: Callable[[float], float], lam: float, limit: float) -> float | None:
    """Where g crosses zero between lam (g > 0) and limit; None if it never does."""
    if g(limit) > 0:
        return None
    # bracket geometrically outward for accuracy on narrow intervals
    step = 0.05 if limit > lam else -0.05
    a = lam
    b = lam + step
    while (b - limit) * (1 if step > 0 else -1) < 0 and g(b) > 0:
        a, step = b, step * 2
        b = a + step
    if (b - limit) * (1 if step > 0 else -1) >= 0:
        b = limit
    return float(optimize.brentq(g, min(a, b), max(a, b), xtol=1e-10))


def fit_transform(
    t: tr.Transform,
    y: np.ndarray,
    X: np.ndarray | None = None,
    shift_needed: bool | None = None,
    near: float | None = None,
    gram: np.ndarray | None = None,
) -> tr.Transform:
    """Return a concrete transform, estimating what ``t`` leaves open from ``y`` (and design ``X``).

    ``shift_needed`` says whether a log needs a shift (decided on the whole
    column, so every fold agrees on the family); the value comes from ``y``.
    """
    if t.is_fitted:
        return t
    if t.name == "log":
        need = tr.needs_shift(y) if shift_needed is None else shift_needed
        if not need:
            return replace(t, shift=0.0)
        return replace(t, shift=tr.chosen_shift(y), estimated=True)
    if t.name in tr.LAMBDA_NAMES:
        est = estimate_lambda(t.name, y, X, with_interval=False, near=near, gram=gram)
        return replace(t, lam=est.lam, estimated=True)
    return t


# ------------------------------------------------------------ every training fold at once
_SQRT_EPS = math.sqrt(2.2e-16)
#: evaluations per problem at most (scipy's minimize_scalar(method="bounded") default)
BRENT_MAXFUN = 500
_GOLDEN = 0.5 * (3.0 - math.sqrt(5.0))


def _brent_max(
    f: Callable[[np.ndarray, np.ndarray], np.ndarray],
    lo: np.ndarray,
    hi: np.ndarray,
    xatol: float,
) -> tuple[np.ndarray, np.ndarray]:
    """Maximise f_i over [lo_i, hi_i] for every i at once: the bounded Brent method
    (golden section with parabolic steps, Brent 1973, ch. 5) step for step as
    ``scipy.optimize.minimize_scalar(method="bounded")`` takes it, on -f, with every
    unfinished problem's evaluation of one step made in one call ``f(index, x)``.
    Returns (argmax, max)."""
    F = lo.size
    a, b = lo.astype(float).copy(), hi.astype(float).copy()
    fulc = a + _GOLDEN * (b - a)
    nfc, xf = fulc.copy(), fulc.copy()
    rat = np.zeros(F)
    e = np.zeros(F)
    fx = -f(np.arange(F), xf)
    num = np.ones(F, dtype=int)
    ffulc, fnfc = fx.copy(), fx.copy()
    xm = 0.5 * (a + b)
    tol1 = _SQRT_EPS * np.abs(xf) + xatol / 3.0
    tol2 = 2.0 * tol1
    fu = np.full(F, np.inf)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        act = np.abs(xf - xm) > (tol2 - 0.5 * (b - a))
        while act.any():
            # a parabola through the three best points, where the last steps allow one
            r = (xf - nfc) * (fx - ffulc)
            q = (xf - fulc) * (fx - fnfc)
            p = (xf - fulc) * q - (xf - nfc) * r
            q = 2.0 * (q - r)
            p = np.where(q > 0.0, -p, p)
            q = np.abs(q)
            ok = (
                (np.abs(e) > tol1)
                & (np.abs(p) < np.abs(0.5 * q * e))
                & (p > q * (a - xf))
                & (p < q * (b - xf))
            )
            ratp = p / np.where(ok, q, 1.0)
            x = xf + ratp
            si = np.sign(xm - xf) + ((xm - xf) == 0)
            ratp = np.where(((x - a) < tol2) | ((b - x) < tol2), tol1 * si, ratp)
            # else a golden-section step into the larger part
            eg = np.where(xf >= xm, a - xf, b - xf)
            e = np.where(act, np.where(ok, rat, eg), e)
            rat = np.where(act, np.where(ok, ratp, _GOLDEN * eg), rat)
            si = np.sign(rat) + (rat == 0)
            x = xf + si * np.maximum(np.abs(rat), tol1)
            i = np.flatnonzero(act)
            fu[:] = np.inf
            fu[i] = -f(i, x[i])
            num += act
            better = act & (fu <= fx)
            worse = act & ~better
            left = x < xf
            a = np.where(better & ~left, xf, np.where(worse & left, x, a))
            b = np.where(better & left, xf, np.where(worse & ~left, x, b))
            c1 = worse & ((fu <= fnfc) | (nfc == xf))
            c2 = worse & ~c1 & ((fu <= ffulc) | (fulc == xf) | (fulc == nfc))
            moved = better | c1
            fulc, ffulc = (
                np.where(moved, nfc, np.where(c2, x, fulc)),
                np.where(moved, fnfc, np.where(c2, fu, ffulc)),
            )
            nfc, fnfc = (
                np.where(better, xf, np.where(c1, x, nfc)),
                np.where(better, fx, np.where(c1, fu, fnfc)),
            )
            xf, fx = np.where(better, x, xf), np.where(better, fu, fx)
            xm = 0.5 * (a + b)
            tol1 = _SQRT_EPS * np.abs(xf) + xatol / 3.0
            tol2 = 2.0 * tol1
            act &= (np.abs(xf - xm) > (tol2 - 0.5 * (b - a))) & (num < BRENT_MAXFUN)
    return xf, -fx


class _FoldProfiles:
    """Box-Cox profile log-likelihoods (geometric-mean scaled form, as in
    :func:`_scaled_box_cox`) of several training folds, evaluated together.

    ``v`` (n,) is log y (or log(1 + y)), ``M`` (F, n) the training rows, ``grams`` the folds'
    X'X.  ``X`` is the design on all rows (n, p), or with ``owner`` one design per candidate
    (C, n, p) and ``owner[f]`` the candidate whose fold f is (the folds of several
    candidates with designs of one width, evaluated together).  Each fold's column-scaled
    X'X is checked and factored as in :class:`_Projector` (all folds in one stacked call); a
    fold's RSS comes from its factor, rss = z'z - c'c, unless the subtraction could lose
    accuracy (rss <= 1e-7 z'z), when that fold's own :class:`_Projector` forms the residual
    from QR.
    """

    def __init__(
        self,
        v: np.ndarray,
        X: np.ndarray,
        M: np.ndarray,
        grams: np.ndarray,
        owner: np.ndarray | None = None,
    ):
        F = M.shape[0]
        self.X, self.M, self.owner = X, M, owner
        self.nf = M.sum(axis=1).astype(float)
        self.lgm = np.array([np.mean(v[row]) for row in M])  # as the one-fold path
        self.gm = np.exp(self.lgm)
        self.w = np.where(M, v - self.lgm[:, None], 0.0)
        scale = np.sqrt(np.maximum(np.diagonal(grams, axis1=1, axis2=2), 0.0))
        scale = np.where(scale == 0, 1.0, scale)
        self.scale = scale
        G = grams / (scale[:, :, None] * scale[:, None, :])
        self.ok = np.all(np.isfinite(G), axis=(1, 2))
        self.L = np.zeros_like(G)
        if np.any(self.ok):
            ev = np.linalg.eigvalsh(G[self.ok])
            good = np.zeros(F, dtype=bool)
            good[self.ok] = ev[:, 0] > 1e-8 * ev[:, -1]
            self.ok = good
        if np.any(self.ok):
            try:
                self.L[self.ok] = np.linalg.cholesky(G[self.ok])
            except np.linalg.LinAlgError:
                self.ok[:] = False
        ones = self._cross(np.arange(F), M.astype(float))  # each fold's column sums
        self.has_const = np.zeros(F, dtype=bool)
        if np.any(self.ok):
            c = self._coef_rhs(np.flatnonzero(self.ok), ones[self.ok])
            self.has_const[self.ok] = (self.nf[self.ok] - np.sum(c * c, axis=1)) < (
                1e-12 * self.nf[self.ok]
            )
        self._proj: dict[int, _Projector] = {}

    def _cross(self, idx: np.ndarray, z: np.ndarray) -> np.ndarray:
        """X'z of folds ``idx`` for their rows ``z`` (len(idx), n), each on its own design."""
        if self.owner is None:
            out: np.ndarray = np.matmul(z, self.X)
            return out
        own = self.owner[idx]
        out = np.empty((idx.size, self.X.shape[2]))
        # runs of folds of one candidate (a candidate's folds sit side by side): per run the
        # one-candidate path's product, on a slice of z
        if idx.size == 0:
            return out
        cut = np.flatnonzero(own[1:] != own[:-1]) + 1
        starts = np.concatenate([[0], cut]).tolist()
        ends = np.concatenate([cut, [idx.size]]).tolist()
        for a, b in zip(starts, ends, strict=True):
            out[a:b] = np.matmul(z[a:b], self.X[own[a]])
        return out

    def _design(self, f: int) -> np.ndarray:
        return self.X if self.owner is None else self.X[self.owner[f]]

    def _coef_rhs(self, idx: np.ndarray, xz: np.ndarray) -> np.ndarray:
        c: np.ndarray = np.linalg.solve(self.L[idx], (xz / self.scale[idx])[:, :, None])[:, :, 0]
        return c

    def llf(self, idx: np.ndarray, lam: np.ndarray) -> np.ndarray:
        """Profile log-likelihood of folds ``idx`` at ``lam`` (one value per fold)."""
        gm, lgm = self.gm[idx], self.lgm[idx]
        zero = np.abs(lam) < 1e-12
        ls = np.where(zero, 1.0, lam)
        w = self.w[idx]  # 0 off the training rows, so z is 0 there too
        with np.errstate(over="ignore", invalid="ignore"):
            z = np.expm1(ls[:, None] * w)
            z *= gm[:, None]
            z /= ls[:, None]
            if np.any(zero):
                z[zero] = gm[zero][:, None] * w[zero]
            shift = gm * np.expm1(-ls * lgm) / ls
            adjust = np.flatnonzero(~zero & ~self.has_const[idx])
            if adjust.size:  # z - shift on the training rows, 0 elsewhere
                z[adjust] = (z[adjust] - shift[adjust][:, None]) * self.M[idx[adjust]]
            finite = np.all(np.isfinite(z), axis=1)
            if not np.all(finite):
                z[~finite] = 0.0
            zz = np.einsum("fb,fb->f", z, z)
            c = self._coef_rhs(idx, self._cross(idx, z))
            rss = zz - np.sum(c * c, axis=1)
        for j in np.flatnonzero(finite & ~(rss > 1e-7 * zz)):
            f = int(idx[j])
            if f not in self._proj:
                rows = np.flatnonzero(self.M[f])
                self._proj[f] = _Projector(self._design(f)[rows], rows.size)
            rss[j] = self._proj[f].rss(z[j, self.M[f]])
        n = self.nf[idx]
        with np.errstate(divide="ignore", invalid="ignore"):
            out = -0.5 * n * (math.log(2 * math.pi) + 1 + np.log(rss / n))
        return np.where(finite & (rss > 0), out, -math.inf)


def fold_lambdas(
    family: str,
    y: np.ndarray,
    X: np.ndarray,
    train: list[np.ndarray],
    grams: np.ndarray,
    near: float | None,
) -> list[float | None]:
    """The lambda of every training fold at once: what
    ``estimate_lambda(family, y[rows], X[rows], with_interval=False, near=near)`` finds on
    each fold (the same bracket around ``near``, the same grids, the same bounded Brent
    refinement), with every step's evaluations of all folds made together.  ``grams``
    (F, p, p): the folds' X'X.  None for a fold this path does not take (its X'X fails the
    condition check, the family is Yeo-Johnson with negative values, or no finite profile
    value was found): the one-fold :func:`estimate_lambda` answers for it (and names the
    problem).
    """
    return _lambdas(family, y, X, None, train, grams, np.full(len(train), _no_near(near)))


@dataclass(frozen=True)
class FoldLambdaProblem:
    """One candidate's per-fold lambdas, as :func:`fold_lambdas` takes them: its design
    ``X`` (n, p) on all rows, the folds' training rows and X'X (F, p, p), the warm start."""

    X: np.ndarray
    train: list[np.ndarray]
    grams: np.ndarray
    near: float | None


def many_fold_lambdas(
    family: str, y: np.ndarray, problems: list[FoldLambdaProblem]
) -> list[list[float | None]]:
    """:func:`fold_lambdas` of many candidates (one response ``y``, each candidate its own
    design and warm start): the folds of all candidates whose designs have the same width
    take every grid evaluation and every Brent step together, each fold exactly the steps
    it takes alone."""
    out: list[list[float | None]] = [[None] * len(pr.train) for pr in problems]
    widths: dict[int, list[int]] = {}
    for i, pr in enumerate(problems):
        widths.setdefault(pr.X.shape[1], []).append(i)
    for members in widths.values():
        sizes = [len(problems[i].train) for i in members]
        got = _lambdas(
            family,
            y,
            np.stack([problems[i].X for i in members]),
            np.repeat(np.arange(len(members)), sizes),
            [rows for i in members for rows in problems[i].train],
            np.concatenate([problems[i].grams for i in members]),
            np.repeat([_no_near(problems[i].near) for i in members], sizes),
        )
        first = 0
        for i, size in zip(members, sizes, strict=True):
            out[i] = got[first : first + size]
            first += size
    return out


def many_lambdas(family: str, y: np.ndarray, designs: list[np.ndarray]) -> list[float | None]:
    """The all-rows lambda of many designs (one response ``y``, designs (n, p_c)): what
    ``estimate_lambda(family, y, X, with_interval=False)`` finds for each (the same grid of
    25 points over [-3, 3], the same bounded Brent refinement with xatol 1e-9), with every
    step's evaluations of all designs of one width made together (:func:`many_fold_lambdas`
    with all rows as the one fold).  The profile's values differ from the one-design path's
    in rounding only (X'X formed once for the stack, products in another order), which can
    move the argmax of a flat maximum within Brent's tolerance: tests compare the two to
    1e-6.  None for a design this path does not take (its scaled X'X fails the condition
    check, Yeo-Johnson with negative values, no finite profile value): the one-design path
    answers for it (and names the problem)."""
    n = np.asarray(y).size
    rows = [np.arange(n)]
    problems = []
    for X in designs:
        with np.errstate(over="ignore", invalid="ignore"):
            gram = (X.T @ X)[None]
        problems.append(FoldLambdaProblem(X, rows, gram, None))
    return [lams[0] for lams in many_fold_lambdas(family, y, problems)]


def _no_near(near: float | None) -> float:
    return math.nan if near is None else float(near)


def _lambdas(
    family: str,
    y: np.ndarray,
    X: np.ndarray,
    owner: np.ndarray | None,
    train: list[np.ndarray],
    grams: np.ndarray,
    near: np.ndarray,
) -> list[float | None]:
    """:func:`fold_lambdas` with a warm start per fold (``near`` (F,), NaN for none) and,
    with ``owner``, a design per candidate (``X`` (C, n, p), see :class:`_FoldProfiles`)."""
    F = len(train)
    out: list[float | None] = [None] * F
    y = np.asarray(y, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):  # a fold with y <= 0: not finite
        if family == "box_cox":
            v = np.log(y)
        elif family == "yeo_johnson" and np.all(y >= 0):
            v = np.log1p(y)  # Yeo-Johnson of y >= 0 is Box-Cox of 1 + y (see _profile)
        else:
            return out
    M = np.zeros((F, y.size), dtype=bool)
    for f, rows in enumerate(train):
        M[f, rows] = True
    prof = _FoldProfiles(v, X, M, grams, owner)
    todo = np.flatnonzero(prof.ok)
    if todo.size == 0:
        return out
    T = todo.size
    n_grid = 25
    grid = np.full((T, n_grid), np.nan)
    vals = np.full((T, n_grid), -math.inf)
    width = np.zeros(T, dtype=int)  # grid points in use per fold
    nr = near[todo]
    pending = np.ones(T, dtype=bool)
    started = np.isfinite(nr)
    if np.any(started):
        s = np.flatnonzero(started)
        ns = nr[s][:, None]
        trio = np.clip(ns + np.array([-0.25, 0.0, 0.25]), *LAMBDA_BOUNDS)  # (S, 3)
        tv = np.stack([prof.llf(todo[s], trio[:, g]) for g in range(3)], axis=1)
        hold = (
            np.all(np.isfinite(tv), axis=1)
            & (tv[:, 1] >= tv[:, 0])
            & (tv[:, 1] >= tv[:, 2])
            & (trio[:, 0] < trio[:, 2])
        )
        h = s[hold]
        grid[h, :3], vals[h, :3], width[h] = trio[hold], tv[hold], 3
        pending[h] = False
        p = s[~hold]
        if p.size:
            g9 = np.clip(nr[p][:, None] + np.linspace(-1.0, 1.0, 9), *LAMBDA_BOUNDS)  # (P, 9)
            v9 = np.stack([prof.llf(todo[p], g9[:, g]) for g in range(9)], axis=1)
            i9 = np.argmax(np.where(np.isfinite(v9), v9, -np.inf), axis=1)
            at = g9[np.arange(p.size), i9]
            edge = np.isin(i9, (0, 8)) & (LAMBDA_BOUNDS[0] < at) & (at < LAMBDA_BOUNDS[1])
            keep = np.isfinite(v9[np.arange(p.size), i9]) & ~edge
            grid[p[keep], :9], vals[p[keep], :9], width[p[keep]] = g9[keep], v9[keep], 9
            pending[p[keep]] = False
    if np.any(pending):
        g25 = np.linspace(LAMBDA_BOUNDS[0], LAMBDA_BOUNDS[1], n_grid)
        p = np.flatnonzero(pending)
        v25 = np.stack([prof.llf(todo[p], np.full(p.size, g)) for g in g25], axis=1)
        grid[p], vals[p], width[p] = g25, v25, n_grid
    found = np.any(np.isfinite(vals), axis=1)
    rows = np.arange(T)
    i = np.argmax(np.where(np.isfinite(vals), vals, -np.inf), axis=1)
    lo = grid[rows, np.maximum(i - 1, 0)]
    hi = grid[rows, np.minimum(i + 1, width - 1)]
    use = np.flatnonzero(found)
    if use.size == 0:
        return out
    lam, best = _brent_max(lambda j, x: prof.llf(todo[use[j]], x), lo[use], hi[use], xatol=1e-9)
    gi = grid[use, i[use]]
    gv = vals[use, i[use]]
    lam = np.where(gv > best, gi, lam)
    for j, u in enumerate(use):
        out[int(todo[u])] = float(lam[j])
    return out
