"""Private helpers for :mod:`service.core.conditions` and :mod:`service.core.plots`.

One ordinary-least-squares fit (:class:`Fit`) is shared by every check, and each published
test has one guarded runner (:func:`guarded`) that returns a frozen, typed result: a
:class:`Check` subclass named for the test (its contract form is written in
``service/api/render/conditions.py``).  A test that cannot run (too few rows, a singular
auxiliary regression, zero residuals) returns ``statistic``/``p_value`` ``None`` and a
``reason``; it never raises and never holds NaN or infinity.

Every least-squares computation runs on one thin singular value decomposition of the
design (:class:`LeastSquares`, the decomposition statsmodels' ``pinv`` fit makes): the fit,
the hat values, the auxiliary regressions of RESET, the rainbow test, Breusch-Pagan, White and
Breusch-Godfrey (each an added-variable or small auxiliary solve, O(n k^2), never a refit of
the whole model).  The tests check every statistic against the statsmodels function named in
its ``source`` to 1e-8.  Distribution functions come from scipy, the normality and
Durbin-Watson statistics from statsmodels and scipy.  A few quantities use an exact closed
form instead of a library call, because the library route refits the model once per row or
costs O(n^2) and so cannot serve a million rows:

* externally studentised residuals, t_i = r_i sqrt((n-p-1)/(n-p-r_i^2)), and
  DFFITS_i = t_i sqrt(h_ii/(1-h_ii)) (Belsley, Kuh & Welsch 1980, ch. 2), where
  ``OLSInfluence`` runs a leave-one-out loop;
* the added-variable t-test of one extra regressor (Frisch & Waugh 1933; Lovell 1963),
  instead of one more full OLS fit per predictor;
* the Ljung & Box (1978) Q statistic from the FFT autocorrelations of
  ``statsmodels.tsa.stattools.acf`` (``acorr_ljungbox`` takes O(n^2) time: 17 s at 20,000
  rows).
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, fields, replace
from typing import Any, ClassVar, TypeVar

import numpy as np
from scipy import special, stats
from scipy.linalg import cho_factor, cho_solve, qr
from statsmodels.stats import diagnostic as smd
from statsmodels.stats import stattools as smt
from statsmodels.tsa.stattools import acf

from . import sources as src

#: residual norm below this fraction of the response's spread counts as an exact fit
PERFECT_FIT_RTOL = 1e-8
#: leverage this close to 1 means the fit passes through the row
LEVERAGE_ONE_TOL = 1e-10
#: scipy documents Shapiro-Wilk p-values as unreliable above 5000 rows
SHAPIRO_MAX_N = 5000
#: White's auxiliary design is n x q; skip it above this many cells (time and memory budget)
WHITE_MAX_CELLS = 5_000_000
#: the rainbow test sorts all rows by Mahalanobis distance; skip it above this many rows
RAINBOW_MAX_N = 200_000


class NotApplicable(Exception):
    """A test that cannot run on these data; the message is shown as the reason."""


def num(value: Any) -> float | None:
    """``float(value)`` when finite, else ``None`` (JSON has no NaN or infinity)."""
    try:
        out = float(value)
    except (TypeError, ValueError):
        return None
    return out if math.isfinite(out) else None


# ------------------------------------------------------------------------- typed results
#: what a curvature check fits
CURVATURE_FORM = "t-test of the squared (centred) predictor added to the model"
#: the share of rows in the rainbow test's central part
RAINBOW_FRAC = 0.5
#: what RESET adds to the model
RESET_FORM = "F test of fitted^2 and fitted^3 (standardised fitted values)"
#: the form of the Breusch-Pagan statistic
BREUSCH_PAGAN_FORM = "Koenker (1981) studentised LM = n R^2 of e^2 on the model's regressors"
#: common-practice range of an unremarkable Durbin-Watson d, and the rule that reads it
DURBIN_WATSON_RANGE = (1.5, 2.5)
DURBIN_WATSON_RULE = "common practice: 1.5 <= d <= 2.5 is unremarkable; no p-value is computed"


@dataclass(frozen=True, kw_only=True)
class Check:
    """One test of a condition.

    ``statistic`` and ``p_value`` are finite floats or ``None``; ``reason`` says why the
    statistic is missing.  ``ran`` is true when the computation finished, so the test's
    by-products (degrees of freedom, F form, ...) are reported; ``primary`` says whether the
    test decides its condition (``None`` for tests outside the decision, e.g. thresholds).
    """

    name: str
    statistic: float | None = None
    p_value: float | None = None
    reason: str | None = None
    ran: bool = False
    primary: bool | None = None


@dataclass(frozen=True, kw_only=True)
class ResetCheck(Check):
    """Ramsey's RESET; ``powers`` of the fitted values added, ``df`` (numerator, denominator)."""

    form: ClassVar[str] = RESET_FORM
    source: ClassVar[str] = src.RESET
    powers: tuple[int, ...] = (2, 3)
    df: tuple[float, float] | None = None


@dataclass(frozen=True, kw_only=True)
class RainbowCheck(Check):
    """Utts' rainbow test on the central :data:`RAINBOW_FRAC` of the rows."""

    frac: ClassVar[float] = RAINBOW_FRAC
    source: ClassVar[str] = src.RAINBOW


@dataclass(frozen=True, kw_only=True)
class CurvatureCheck(Check):
    """t-test of the squared (centred) predictor added to the model, for one numeric term."""

    form: ClassVar[str] = CURVATURE_FORM
    source: ClassVar[str] = src.CURVATURE
    column: str
    label: str
    df: float | None = None
    curvature_sign: int | None = None


@dataclass(frozen=True, kw_only=True)
class ShapiroCheck(Check):
    """Shapiro-Wilk W."""

    source: ClassVar[str] = src.SHAPIRO_WILK


@dataclass(frozen=True, kw_only=True)
class JarqueBeraCheck(Check):
    """Jarque-Bera with the residuals' skewness and kurtosis."""

    source: ClassVar[str] = src.JARQUE_BERA
    df: float | None = None
    skewness: float | None = None
    kurtosis: float | None = None


@dataclass(frozen=True, kw_only=True)
class AndersonDarlingCheck(Check):
    """Anderson-Darling A^2 with estimated mean and standard deviation."""

    source: ClassVar[str] = src.ANDERSON_DARLING


@dataclass(frozen=True, kw_only=True)
class BreuschPaganCheck(Check):
    """Breusch-Pagan in Koenker's studentised form, with its F form."""

    robust: ClassVar[bool] = True
    form: ClassVar[str] = BREUSCH_PAGAN_FORM
    source: ClassVar[str] = src.BREUSCH_PAGAN
    df: float | None = None
    f_statistic: float | None = None
    f_p_value: float | None = None


@dataclass(frozen=True, kw_only=True)
class WhiteCheck(Check):
    """White's test, with its F form."""

    source: ClassVar[str] = src.WHITE
    f_statistic: float | None = None
    f_p_value: float | None = None


@dataclass(frozen=True, kw_only=True)
class DurbinWatsonCheck(Check):
    """Durbin-Watson d (no p-value); read against :data:`DURBIN_WATSON_RANGE`."""

    common_practice_range: ClassVar[tuple[float, float]] = DURBIN_WATSON_RANGE
    rule: ClassVar[str] = DURBIN_WATSON_RULE
    source: ClassVar[str] = src.DURBIN_WATSON


@dataclass(frozen=True, kw_only=True)
class BreuschGodfreyCheck(Check):
    """Breusch-Godfrey LM at ``lags`` lags, with its F form."""

    source: ClassVar[str] = src.BREUSCH_GODFREY
    lags: int
    df: float | None = None
    f_statistic: float | None = None
    f_p_value: float | None = None


@dataclass(frozen=True, kw_only=True)
class LjungBoxCheck(Check):
    """Ljung-Box Q at ``lags`` lags on ``df`` degrees of freedom."""

    source: ClassVar[str] = src.LJUNG_BOX
    lags: int
    df: float


C = TypeVar("C", bound=Check)


def finished(check: C, **more: Any) -> C:
    """``check`` (with the fields ``more``) with every non-finite number as ``None`` (JSON
    has no NaN or infinity) and a ``reason`` when the statistic is missing."""
    changes: dict[str, Any] = {
        f.name: num(v)
        for f in fields(check)
        if isinstance(v := getattr(check, f.name), (float, np.floating, np.integer))
    }
    out = replace(check, **{**changes, **more})
    if out.statistic is None and out.reason is None:
        out = replace(out, reason="undefined for these data")
    return out


# Upper tail probabilities of the F, chi-squared and t distributions: the special
# functions scipy.stats' distributions call (f.sf -> fdtrc, chi2.sf -> chdtrc, t.sf ->
# stdtr at -t), with their support rules (nan for a degree of freedom <= 0 or nan, 1 below
# the support), without the generic argument handling of a distribution object (about
# 0.25 ms a call, several calls per entry).
def f_sf(x: float, dfn: float, dfd: float) -> float:
    """P(F > x) for F ~ F(dfn, dfd): ``scipy.stats.f.sf(x, dfn, dfd)``."""
    if not (dfn > 0 and dfd > 0) or math.isnan(x):
        return math.nan
    return 1.0 if x < 0 else float(special.fdtrc(dfn, dfd, x))


def chi2_sf(x: float, df: float) -> float:
    """P(X > x) for X ~ chi-squared(df): ``scipy.stats.chi2.sf(x, df)``."""
    if not df > 0 or math.isnan(x):
        return math.nan
    return 1.0 if x < 0 else float(special.chdtrc(df, x))


def t_sf(x: float, df: float) -> float:
    """P(T > x) for T ~ t(df): ``scipy.stats.t.sf(x, df)``."""
    if not df > 0 or math.isnan(x):
        return math.nan
    return float(special.stdtr(df, -x))


def skew_kurtosis(e: np.ndarray) -> tuple[float, float]:
    """Sample skewness m3 / m2^1.5 and kurtosis m4 / m2^2 (biased moments about the mean,
    as ``scipy.stats.skew`` and ``3 + scipy.stats.kurtosis`` give them; nan for a constant
    sample, by their rule)."""
    e = np.asarray(e, dtype=float)
    mean = e.mean()
    d = e - mean
    d2 = d * d
    m2 = float(d2.mean())
    if m2 <= (np.finfo(float).resolution * mean) ** 2:
        return math.nan, math.nan
    m3 = float((d2 * d).mean())
    m4 = float((d2 * d2).mean())
    return m3 / m2**1.5, m4 / m2**2


def guarded(failed: C, compute: Callable[[], C]) -> C:
    """Run one test: ``compute()``'s result (:func:`finished`, marked ``ran``), or ``failed``
    (the test's fixed description) with ``None`` numbers and a ``reason``."""
    try:
        # Degenerate inputs give 0/0 inside numpy; such values are reported as None below.
        with np.errstate(all="ignore"):
            out = compute()
    except NotApplicable as exc:
        return replace(failed, reason=str(exc))
    except Exception as exc:
        return replace(failed, reason=f"could not be computed ({type(exc).__name__}: {exc})")
    return finished(out, ran=True)


@dataclass(frozen=True, eq=False)
class LeastSquares:
    """Least squares on the thin SVD X = U diag(s) V' (the decomposition of statsmodels'
    ``pinv`` fit): minimum-norm coefficients, projections and the rank.

    Singular values at or below ``max(s) * max(n, p) * eps`` (numpy's ``matrix_rank`` rule)
    count as zero, so a rank-deficient design (e.g. a dummy repeated by its square) is solved
    on its column space.
    """

    U: np.ndarray  # n x rank, orthonormal basis of the column space
    s: np.ndarray  # rank singular values
    Vt: np.ndarray  # rank x p

    @classmethod
    def of(cls, X: np.ndarray) -> LeastSquares:
        U, s, Vt = np.linalg.svd(X, full_matrices=False)
        keep = s > (s[0] if s.size else 0.0) * max(X.shape) * np.finfo(float).eps
        return cls(U[:, keep], s[keep], Vt[keep])

    @property
    def rank(self) -> int:
        return int(self.s.size)

    def coef(self, y: np.ndarray) -> np.ndarray:
        """Minimum-norm least-squares coefficients of ``y`` (vector or columns)."""
        out: np.ndarray = self.Vt.T @ ((self.U.T @ y).T / self.s).T
        return out

    def fitted(self, y: np.ndarray) -> np.ndarray:
        out: np.ndarray = self.U @ (self.U.T @ y)
        return out

    def residual(self, y: np.ndarray) -> np.ndarray:
        out: np.ndarray = y - self.fitted(y)
        return out

    def hat(self) -> np.ndarray:
        """Diagonal of the hat matrix, h_ii = ||U_i||^2."""
        out: np.ndarray = np.einsum("ij,ij->i", self.U, self.U)
        return out


#: scaled Gram matrices of auxiliary designs above this condition number are not solved
#: by Cholesky (their columns are first reduced to an independent set by pivoted QR)
AUX_COND_LIMIT = 1e7


def _cholesky_residual(
    y: np.ndarray, A: np.ndarray, G: np.ndarray, norms: np.ndarray
) -> np.ndarray | None:
    """Residual of ``y`` on ``A`` from the unit-column Gram matrix ``G`` (``A``'s columns
    have lengths ``norms``) by Cholesky, or None when ``G`` is singular or its condition
    number reaches :data:`AUX_COND_LIMIT`.  The residual is formed from the rows, so its
    accuracy is that of the coefficients (about cond * eps, below 1e-9)."""
    w = np.linalg.eigvalsh(G)
    if not (w[0] > 0 and w[-1] / w[0] < AUX_COND_LIMIT):
        return None
    b = cho_solve(cho_factor(G), (A.T @ y) / norms) / norms
    out: np.ndarray = y - A @ b
    return out


def _residual_and_rank(y: np.ndarray, A: np.ndarray) -> tuple[np.ndarray, int]:
    """Residual of ``y`` on ``A`` and the rank of ``A``.

    One O(n q^2) product forms the Gram matrix of ``A``'s unit-length columns.  A
    well-conditioned one (below :data:`AUX_COND_LIMIT`) is solved by Cholesky.  Otherwise
    (a rank-deficient design: squares of 0/1 dummies repeat them) pivoted QR of a square
    root of that Gram matrix (:func:`independent_columns`) keeps a full-rank set of
    columns, solved by Cholesky in turn; only a design still ill-conditioned after that
    goes to the SVD of :class:`LeastSquares` (O(n q^2) with a far larger constant).
    """
    norms = np.sqrt(np.einsum("ij,ij->j", A, A))
    if np.all(norms > 0):
        G = (A.T @ A) / np.outer(norms, norms)
        e = _cholesky_residual(y, A, G, norms)
        if e is not None:
            return e, int(A.shape[1])
        keep = independent_columns(G)
        Ak = A[:, keep]
        e = _cholesky_residual(y, Ak, G[np.ix_(keep, keep)], norms[keep])
        if e is not None:
            return e, int(keep.size)
    ls = LeastSquares.of(A)
    return ls.residual(y), ls.rank


@dataclass(frozen=True)
class Auxiliary:
    """An auxiliary regression: R^2 (centred), the overall F statistic and its p-value, model
    and residual degrees of freedom (rank based, as statsmodels' ``OLS(y, A).fit()``)."""

    r2: float
    f: float
    f_p: float
    df_model: float
    df_resid: float


def _auxiliary(y: np.ndarray, A: np.ndarray) -> Auxiliary:
    """Auxiliary regression of ``y`` on ``A`` that contains a constant (:class:`Auxiliary`)."""
    e, rank = _residual_and_rank(y, A)
    ssr = float(e @ e)
    d = y - y.mean()
    tss = float(d @ d)
    df_model = rank - 1
    df_resid = y.shape[0] - rank
    r2 = 1.0 - ssr / tss
    F = ((tss - ssr) / df_model) / (ssr / df_resid)
    return Auxiliary(r2, F, f_sf(F, df_model, df_resid), float(df_model), float(df_resid))


@dataclass(frozen=True, eq=False)
class Influence:
    """Per-row influence measures (Cook 1977; Belsley, Kuh & Welsch 1980)."""

    leverage: np.ndarray  # h_ii
    standardized: np.ndarray  # internally studentised residuals r_i (NaN where h_ii = 1)
    studentized: np.ndarray  # externally studentised residuals t_i
    cooks: np.ndarray  # Cook's distance D_i
    dffits: np.ndarray  # DFFITS_i


@dataclass(frozen=True, eq=False)
class Fit:
    """The OLS fit every condition check reads from."""

    z: np.ndarray
    X: np.ndarray
    ls: LeastSquares
    params: np.ndarray  # minimum-norm coefficients
    n: int
    rank: int
    df_resid: int
    resid: np.ndarray
    fitted: np.ndarray
    rss: float
    spans_constant: bool
    n_predictor_columns: int  # non-constant columns of X
    residual_reason: str | None  # why residual-based tests cannot run, or None
    influence: Influence | None


def fit_model(z: np.ndarray, X: np.ndarray, has_intercept: bool) -> Fit:
    """Fit ``z`` on ``X`` by OLS and compute the influence measures once."""
    ls = LeastSquares.of(X)
    n = int(z.shape[0])
    rank = ls.rank
    params = ls.coef(z)
    fitted = X @ params
    resid = z - fitted
    rss = float(resid @ resid)
    constant_cols = np.ptp(X, axis=0) == 0
    spans_constant = bool(has_intercept or np.any(constant_cols & (X[0] != 0)))
    if not spans_constant:
        ones_hat = ls.fitted(np.ones(n))
        spans_constant = bool(np.linalg.norm(ones_hat - 1.0) < 1e-8 * math.sqrt(n))
    spread = float(np.linalg.norm(z - z.mean())) if spans_constant else float(np.linalg.norm(z))
    # the second term absorbs rounding when z itself is (nearly) constant
    tol = PERFECT_FIT_RTOL * spread + 1e-12 * float(np.linalg.norm(z))
    reason = None
    if n - rank < 1:
        reason = f"no residual degrees of freedom ({n} rows, {rank} estimated coefficients)"
    elif math.sqrt(rss) <= tol:
        reason = "the residuals are all zero (the model fits the data exactly)"
    infl = None if reason else _influence(ls.hat(), resid, n - rank, int(X.shape[1]))
    return Fit(
        z=z,
        X=X,
        ls=ls,
        params=params,
        n=n,
        rank=rank,
        df_resid=n - rank,
        resid=resid,
        fitted=fitted,
        rss=rss,
        spans_constant=spans_constant,
        n_predictor_columns=int(np.sum(~constant_cols)),
        residual_reason=reason,
        influence=infl,
    )


def _influence(h: np.ndarray, resid: np.ndarray, df_resid: int, k: int) -> Influence:
    """Cook (1977) and Belsley, Kuh & Welsch (1980) measures from the hat values: those of
    statsmodels' ``OLSInfluence`` (``k`` the number of design columns, as it counts them),
    without its per-row loop.  Rows with leverage 1 give 0/0; they are set to NaN."""
    with np.errstate(all="ignore"):
        scale = float(resid @ resid) / df_resid
        r = resid / np.sqrt(scale * (1.0 - h))
        cooks = r**2 / k * h / (1.0 - h)
        if df_resid >= 2:
            t = r * np.sqrt((df_resid - 1) / (df_resid - r**2))
        else:
            t = np.full_like(r, np.nan)
        dffits = t * np.sqrt(h / (1 - h))
    at_one = h >= 1 - LEVERAGE_ONE_TOL
    for arr in (r, t, cooks, dffits):
        arr[at_one | ~np.isfinite(arr)] = np.nan
    return Influence(leverage=h, standardized=r, studentized=t, cooks=cooks, dffits=dffits)


def _require_residuals(fit: Fit) -> None:
    if fit.residual_reason:
        raise NotApplicable(fit.residual_reason)


#: a pivot of the unit-column QR below this share of the largest counts as zero
PIVOT_RTOL = 1e-6


def independent_columns(G: np.ndarray) -> np.ndarray:
    """Indices (ascending) of a full-rank set of columns of a design whose unit-column Gram
    matrix is ``G``, chosen by pivoted QR (Businger & Golub 1965).

    The QR runs on a q x q square root of ``G``, which has the same column norms and inner
    products as the design, so the rows are never touched again; a pivot below
    :data:`PIVOT_RTOL` of the largest counts as zero.
    """
    lam, V = np.linalg.eigh(G)
    root = np.sqrt(np.clip(lam, 0.0, None))[:, None] * V.T  # root.T @ root == G
    _, R, piv = qr(root, mode="economic", pivoting=True)
    diag = np.abs(np.diag(R))
    rank = int(np.sum(diag > PIVOT_RTOL * max(float(diag.max(initial=0.0)), 1e-300)))
    out: np.ndarray = np.sort(piv[:rank])
    return out


def full_rank_columns(Z: np.ndarray) -> np.ndarray:
    """Columns of ``Z`` chosen by pivoted QR (:func:`independent_columns`) to have full
    rank; the cost is one O(n k^2) product."""
    norms = np.linalg.norm(Z, axis=0)
    norms[norms == 0] = 1.0
    return Z[:, independent_columns((Z.T @ Z) / np.outer(norms, norms))]


def standardized_regressors(fit: Fit) -> np.ndarray:
    """[1, standardised non-constant columns of X], reduced to full rank.

    Breusch-Pagan and White statistics are invariant to affine rescaling of the regressors, so
    this changes nothing but the numerical accuracy (e.g. Longley's columns span 1e1..1e6).
    """
    return standardized_columns(fit.X)


def standardized_columns(X: np.ndarray) -> np.ndarray:
    """:func:`standardized_regressors` of the design ``X``."""
    n = X.shape[0]
    keep = np.ptp(X, axis=0) > 0
    if not keep.any():
        return np.ones((n, 1))
    cols = X[:, keep]
    cols = (cols - cols.mean(axis=0)) / cols.std(axis=0)
    # drop collinear columns (e.g. a full dummy set, whose centred columns sum to zero)
    return np.column_stack([np.ones(n), full_rank_columns(cols)])


# ----------------------------------------------------------------------------- linearity
def reset_test(fit: Fit) -> ResetCheck:
    """Ramsey (1969) RESET: F test of adding fitted^2 and fitted^3.

    The powers are taken of the standardised fitted values (centred when the model spans a
    constant, scaled only otherwise): the same column space in exact arithmetic, far better
    conditioned (statsmodels' ``linear_reset`` loses the answer on Longley).
    """

    def compute() -> ResetCheck:
        _require_residuals(fit)
        f = fit.fitted
        s = (f - f.mean()) if fit.spans_constant else f
        scale = float(np.sqrt(np.mean(s**2)))
        if scale == 0 or fit.n_predictor_columns == 0:
            raise NotApplicable("the model has no predictors, so the fitted values are constant")
        s = s / scale
        powers = np.column_stack([s**2, s**3])
        resid_part = fit.ls.residual(powers)
        rel = np.linalg.norm(resid_part, axis=0) / np.linalg.norm(powers, axis=0)
        use = [k for k in range(2) if rel[k] > 1e-7]
        if not use:
            raise NotApplicable(
                "fitted^2 and fitted^3 add nothing to this model (its fitted values take too "
                "few distinct values, e.g. a saturated categorical model)"
            )
        if fit.df_resid - len(use) < 1:
            raise NotApplicable(f"too few rows ({fit.n}) for the RESET auxiliary regression")
        # the added columns' parts orthogonal to X explain what the larger model adds
        # (Frisch-Waugh-Lovell): no refit of the model
        added = LeastSquares.of(resid_part[:, use])
        df_num = added.rank
        df_u = fit.df_resid - df_num
        if df_u < 1:
            raise NotApplicable(f"too few rows ({fit.n}) for the RESET auxiliary regression")
        rss_u = float(np.sum(added.residual(fit.resid) ** 2))
        F = (fit.rss - rss_u) / df_num / rss_u * df_u
        return replace(
            failed,
            statistic=F,
            p_value=f_sf(F, df_num, df_u),
            df=(float(df_num), float(df_u)),
            powers=tuple(k + 2 for k in use),
        )

    failed = ResetCheck(name="Ramsey RESET")
    return guarded(failed, compute)


def rainbow_test(fit: Fit) -> RainbowCheck:
    """Utts (1982) rainbow test, central half of the rows by Mahalanobis distance."""

    def compute() -> RainbowCheck:
        _require_residuals(fit)
        if fit.n_predictor_columns == 0:
            raise NotApplicable("the model has no predictors")
        if fit.n > RAINBOW_MAX_N:
            raise NotApplicable(
                f"omitted above {RAINBOW_MAX_N} rows to keep within the computing budget "
                f"(n = {fit.n}); RESET and the curvature checks still use every row"
            )
        low = math.ceil((1 - RAINBOW_FRAC) / 2 * fit.n)
        if math.floor(low + RAINBOW_FRAC * fit.n) - low <= fit.X.shape[1]:
            raise NotApplicable(
                f"too few rows ({fit.n}) for a central half larger than the number of coefficients"
            )
        # rows ordered by Mahalanobis distance from the centroid of the design, ties broken
        # by the design's values (never the response), as statsmodels orders them
        X = fit.X
        err = X - X.mean(axis=0, keepdims=True)
        vi = np.linalg.pinv(err.T @ err / fit.n)
        dist2 = np.einsum("ij,ij->i", err @ vi, err)  # squared distance: the same order
        by_distance = np.argsort(dist2, kind="stable")
        ordered = dist2[by_distance]
        if np.any(ordered[1:] == ordered[:-1]):  # ties: the design's values break them
            by_distance = np.lexsort((*X.T[::-1], dist2))
        idx = by_distance[low : math.floor(low + RAINBOW_FRAC * fit.n)]
        mid = LeastSquares.of(X[idx])  # a half-sample may lose a rare dummy level: rank df
        ss_mid = float(np.sum(mid.residual(fit.z[idx]) ** 2))
        df_mid = idx.size - mid.rank
        F = (fit.rss - ss_mid) / (fit.n - idx.size) / ss_mid * df_mid
        return replace(failed, statistic=F, p_value=f_sf(F, fit.n - idx.size, df_mid))

    failed = RainbowCheck(name="Rainbow (Utts)")
    return guarded(failed, compute)


def added_variable_ttest(fit: Fit, v: np.ndarray) -> tuple[float, float, float, int]:
    """t-test of ``v`` added to the model: (coefficient, t, p-value, df).

    Identical to refitting OLS with the extra column (Frisch-Waugh-Lovell theorem).
    """
    v_perp = fit.ls.residual(v)
    vv = float(v_perp @ v_perp)
    if vv <= 1e-20 * float(v @ v):
        raise NotApplicable("the squared term is already in the model's column space")
    df = fit.df_resid - 1
    if df < 1:
        raise NotApplicable(f"too few rows ({fit.n}) to test curvature")
    ve = float(v_perp @ fit.resid)
    coef = ve / vv
    rss1 = max(fit.rss - ve * ve / vv, 0.0)
    se = math.sqrt(rss1 / df / vv)
    t = coef / se if se > 0 else math.inf
    return coef, t, 2 * t_sf(abs(t), df), df


@dataclass(frozen=True)
class Curvature:
    """A predictor's partial-residual curve (:func:`curvature`): the linear and quadratic
    coefficients, the t-test of the square added to the model, and whether the curve is
    monotone and read against the flipped scale."""

    slope: float
    curvature: float
    t: float
    p_value: float
    df: int
    monotone: bool
    flipped: bool


def curvature(fit: Fit, j: int, raw: np.ndarray | None) -> Curvature:
    """Curvature of a predictor's partial residuals (component plus residual).

    The partial residual e + b_j w_j is regressed on the centred predictor u and u^2, where u
    is the predictor on the model's scale, sign-flipped when that scale runs against the raw
    values (Tukey's order-preserving convention).  The signs of the linear and quadratic
    coefficients give the bulge; its p-value is the exact t-test of u^2 added to the full
    model, whose coefficient has the same sign and numerator (partial-residual slopes are
    attenuated; Mallows 1986).  ``monotone`` compares the mean partial residual in the thirds
    of u: the bulging rule (Mosteller & Tukey 1977) applies only to monotone curves.
    """
    _require_residuals(fit)
    w = fit.X[:, j]
    if np.ptp(w) == 0:
        raise NotApplicable("the predictor is constant")
    lo, hi = w.min(), w.max()
    if not np.any((w != lo) & (w != hi)):
        raise NotApplicable("the predictor takes fewer than three distinct values")
    b = float(fit.params[j])
    sign = 1.0
    if raw is not None and np.ptp(raw) > 0 and np.corrcoef(raw, w)[0, 1] < 0:
        sign = -1.0
    u = sign * w
    c = (u - u.mean()) / u.std()
    partial = fit.resid + b * w
    design = np.column_stack([np.ones_like(c), c, c**2])
    coefs = np.linalg.lstsq(design, partial, rcond=None)[0]
    _, t_value, p_value, df = added_variable_ttest(fit, c**2)
    c1, c2 = np.quantile(c, [1 / 3, 2 / 3])
    groups = [c <= c1, (c > c1) & (c < c2), c >= c2]
    means = [float(partial[g].mean()) for g in groups if g.any()]  # ties can empty the middle
    steps = np.sign(np.diff(means))
    monotone = bool(steps.size and np.all(steps == np.sign(coefs[1])) and coefs[1] != 0)
    return Curvature(
        slope=float(coefs[1]),
        curvature=float(coefs[2]),
        t=t_value,
        p_value=p_value,
        df=df,
        monotone=monotone,
        flipped=sign < 0,
    )


# ----------------------------------------------------------------------------- normality
def shapiro_test(fit: Fit) -> ShapiroCheck:
    """Shapiro & Wilk (1965) W, scipy (Royston 1995 algorithm); 3 <= n <= 5000 only."""

    def compute() -> ShapiroCheck:
        _require_residuals(fit)
        if fit.n < 3:
            raise NotApplicable("Shapiro-Wilk needs at least 3 rows")
        if fit.n > SHAPIRO_MAX_N:
            raise NotApplicable(
                f"omitted: Shapiro-Wilk p-values are not reliable above {SHAPIRO_MAX_N} rows "
                f"(n = {fit.n})"
            )
        out = stats.shapiro(fit.resid)
        return replace(failed, statistic=out.statistic, p_value=out.pvalue)

    failed = ShapiroCheck(name="Shapiro-Wilk")
    return guarded(failed, compute)


def jarque_bera_test(fit: Fit) -> JarqueBeraCheck:
    """Jarque & Bera (1980) skewness-kurtosis test: JB = n/6 (S^2 + (K - 3)^2 / 4) against
    chi-squared with 2 degrees of freedom, as statsmodels' ``jarque_bera`` (the moments
    formed once here instead of through two scipy calls)."""

    def compute() -> JarqueBeraCheck:
        _require_residuals(fit)
        if fit.resid.size < 2:
            raise NotApplicable("Jarque-Bera needs at least 2 rows")
        skew, kurt = skew_kurtosis(fit.resid)
        jb = fit.resid.size / 6.0 * (skew**2 + 0.25 * (kurt - 3.0) ** 2)
        return replace(
            failed, statistic=jb, p_value=chi2_sf(jb, 2), df=2.0, skewness=skew, kurtosis=kurt
        )

    failed = JarqueBeraCheck(name="Jarque-Bera")
    return guarded(failed, compute)


def anderson_darling_test(fit: Fit) -> AndersonDarlingCheck:
    """Anderson & Darling (1952) A^2 with estimated mean and sd (Stephens 1974), statsmodels."""

    def compute() -> AndersonDarlingCheck:
        _require_residuals(fit)
        if fit.n < 8:
            raise NotApplicable(
                "Anderson-Darling p-values use an approximation meant for at least 8 rows"
            )
        a2, p = smd.normal_ad(fit.resid)
        return replace(failed, statistic=a2, p_value=p)

    failed = AndersonDarlingCheck(name="Anderson-Darling")
    return guarded(failed, compute)


# ------------------------------------------------------------------------ equal variance
def breusch_pagan_test(fit: Fit, Z: np.ndarray | None) -> BreuschPaganCheck:
    """Breusch & Pagan (1979) LM test in Koenker's (1981) studentised form (robust=True).

    ``Z`` is :func:`standardized_regressors` of the fit (``None`` when it has no residuals).
    """

    def compute() -> BreuschPaganCheck:
        _require_residuals(fit)
        assert Z is not None  # absent only when the fit has no residuals
        if Z.shape[1] < 2:
            raise NotApplicable("the model has no predictors to relate the spread to")
        aux = _auxiliary(fit.resid**2, Z)
        lm = fit.n * aux.r2
        return replace(
            failed,
            statistic=lm,
            p_value=chi2_sf(lm, aux.df_model),
            df=float(Z.shape[1] - 1),
            f_statistic=aux.f,
            f_p_value=aux.f_p,
        )

    failed = BreuschPaganCheck(name="Breusch-Pagan (Koenker studentised)")
    return guarded(failed, compute)


#: products of n rows by q columns by q columns a second that :func:`white_seconds` assumes:
#: a quarter of what one BLAS thread of the 2-core development machine managed for the
#: auxiliary Gram matrix (1.6e10 at 10,000 rows x 496 columns), to allow for a busy machine
WHITE_RATE = 4e9
#: White's test always runs when its estimated cost is below this many seconds
WHITE_ALWAYS_S = 0.1


def white_seconds(n: int, k: int) -> float:
    """Estimated seconds of White's test for ``n`` rows and ``k`` standardised regressors
    (constant included): the auxiliary Gram matrix of its q = k(k+1)/2 columns, n q^2
    products at :data:`WHITE_RATE`; 0 where the test is omitted for its size (more than
    n/2 columns, more than :data:`WHITE_MAX_CELLS` cells)."""
    q = k * (k + 1) // 2
    if q > n / 2 or q * n > WHITE_MAX_CELLS:
        return 0.0
    return n * q * q / WHITE_RATE


def white_test(fit: Fit, Z: np.ndarray | None, seconds: float | None = None) -> WhiteCheck:
    """White (1980) test: e^2 on the regressors, their squares and cross-products.

    ``seconds``: the time the test may take (None: no limit); when its estimated cost
    (:func:`white_seconds`) is above both that and :data:`WHITE_ALWAYS_S`, it is not run and
    the reason says so.
    """

    def compute() -> WhiteCheck:
        _require_residuals(fit)
        assert Z is not None  # absent only when the fit has no residuals
        return _white(fit.resid, Z, seconds, failed)

    failed = WhiteCheck(name="White")
    return guarded(failed, compute)


def white_test_of(resid: np.ndarray, Z: np.ndarray, seconds: float | None = None) -> WhiteCheck:
    """:func:`white_test` of the residuals ``resid`` of a fit that has residuals (the
    least-squares residuals of the model on the design whose :func:`standardized_columns`
    are ``Z``)."""
    failed = WhiteCheck(name="White")
    return guarded(failed, lambda: _white(resid, Z, seconds, failed))


def _white(
    resid: np.ndarray, Z: np.ndarray, seconds: float | None, failed: WhiteCheck
) -> WhiteCheck:
    n = int(resid.shape[0])
    k = Z.shape[1]
    q = k * (k + 1) // 2
    if k < 2:
        raise NotApplicable("the model has no predictors to relate the spread to")
    if q > n / 2:
        raise NotApplicable(
            f"omitted: White's auxiliary regression has {q} columns, too many for {n} "
            "rows (needs at most n/2)"
        )
    if q * n > WHITE_MAX_CELLS:
        raise NotApplicable(
            f"omitted: White's auxiliary design ({n} x {q}) exceeds the computing "
            "budget; the Breusch-Pagan test still uses every row"
        )
    cost = white_seconds(n, k)
    if seconds is not None and cost > max(seconds, WHITE_ALWAYS_S):
        raise NotApplicable(
            f"not run: its auxiliary regression on {q} squares and cross-products of "
            f"{n} rows would take about {cost:.2g} s, more than the "
            f"{max(seconds, 0.0):.2g} s left of the request's time limit; the "
            "Breusch-Pagan test still decides equal variance"
        )
    i0, i1 = np.triu_indices(k)
    # squares of 0/1 dummies repeat them: degrees of freedom use the rank
    aux = _auxiliary(resid**2, Z[:, i0] * Z[:, i1])
    lm = n * aux.r2
    return replace(
        failed,
        statistic=lm,
        p_value=chi2_sf(lm, aux.df_model),
        f_statistic=aux.f,
        f_p_value=aux.f_p,
    )


# -------------------------------------------------------------------------- independence
def durbin_watson_test(resid_ordered: np.ndarray) -> DurbinWatsonCheck:
    """Durbin & Watson (1950, 1951) d on the ordered residuals; statsmodels gives no p-value."""

    def compute() -> DurbinWatsonCheck:
        return replace(failed, statistic=smt.durbin_watson(resid_ordered))

    failed = DurbinWatsonCheck(name="Durbin-Watson")
    return guarded(failed, compute)


def breusch_godfrey_lags(n: int) -> int:
    """Lag order for Breusch-Godfrey: min(4, max(1, n // 25)) (design choice)."""
    return min(4, max(1, n // 25))


def breusch_godfrey_test(fit: Fit, order: np.ndarray) -> BreuschGodfreyCheck:
    """Breusch (1978) / Godfrey (1978) LM test on an OLS refit with rows in ``order``."""
    nlags = breusch_godfrey_lags(fit.n)

    def compute() -> BreuschGodfreyCheck:
        _require_residuals(fit)
        extra = 0 if fit.spans_constant else 1  # a constant is added if X lacks one
        if fit.df_resid - nlags - extra < 1:
            raise NotApplicable(f"too few rows ({fit.n}) for {nlags} lagged residuals")
        e = fit.resid[order]
        lags = np.zeros((fit.n, nlags))
        for j in range(1, nlags + 1):
            lags[j:, j - 1] = e[:-j]  # residuals before the first row count as zero
        # least squares do not depend on the order of the rows: the model's own
        # decomposition serves (rows taken back to the data's order and out again)
        base = LeastSquares.of(np.column_stack([fit.X, np.ones(fit.n)])) if extra else fit.ls
        back = np.argsort(order)

        def on_x(V: np.ndarray) -> np.ndarray:
            out: np.ndarray = base.residual(V[back])[order]
            return out

        # the lagged residuals' parts orthogonal to X explain what they add (Frisch-Waugh-
        # Lovell); the design inherits any rank deficiency of X, so df use ranks
        added = LeastSquares.of(on_x(lags))
        e_x = on_x(e)
        rss_r = float(e_x @ e_x)
        rss_u = float(np.sum(added.residual(e_x) ** 2))
        df_u = fit.n - base.rank - added.rank
        d = e - e.mean()
        lm = fit.n * (1.0 - rss_u / float(d @ d))
        F = (rss_r - rss_u) / nlags / (rss_u / df_u)
        return replace(
            failed,
            statistic=lm,
            p_value=chi2_sf(lm, nlags),
            df=float(nlags),
            f_statistic=F,
            f_p_value=f_sf(F, nlags, df_u),
        )

    failed = BreuschGodfreyCheck(name="Breusch-Godfrey", lags=nlags)
    return guarded(failed, compute)


def ljung_box_test(resid_ordered: np.ndarray) -> LjungBoxCheck:
    """Ljung & Box (1978) Q at lag min(10, n // 5) on the ordered residuals."""
    n = int(resid_ordered.shape[0])
    lags = min(10, n // 5)

    def compute() -> LjungBoxCheck:
        if lags < 1:
            raise NotApplicable("Ljung-Box needs at least 5 rows")
        if np.ptp(resid_ordered) == 0:
            raise NotApplicable("the residuals are constant")
        r = acf(resid_ordered, nlags=lags, fft=True)[1:]
        q = n * (n + 2) * float(np.sum(r**2 / (n - np.arange(1, lags + 1))))
        return replace(failed, statistic=q, p_value=chi2_sf(q, lags))

    failed = LjungBoxCheck(name="Ljung-Box", lags=lags, df=float(max(lags, 0)))
    return guarded(failed, compute)


# --------------------------------------------------------------------- multicollinearity
def generalized_vif(X: np.ndarray, groups: list[list[int]]) -> list[float | None]:
    """Generalised VIF (Fox & Monette 1992) of each column group of ``X``.

    GVIF = det(R_11) det(R_22) / det(R), R the correlation matrix of the non-constant
    columns (the design with an intercept); for a single column it equals 1/(1 - R_j^2), the
    ordinary VIF of statsmodels' ``variance_inflation_factor``.  ``None`` marks an exactly
    collinear group.
    """
    cols = sorted({j for g in groups for j in g})
    if len(groups) < 2:
        return [1.0 for _ in groups]
    pos = {j: k for k, j in enumerate(cols)}
    C = X[:, cols] - X[:, cols].mean(axis=0)
    C = C / np.linalg.norm(C, axis=0)
    R = C.T @ C
    sign, logdet = np.linalg.slogdet(R)
    eig_min = float(np.linalg.eigvalsh(R).min())
    out: list[float | None] = []
    for g in groups:
        if sign <= 0 or eig_min < 1e-12:
            out.append(None)
            continue
        a = [pos[j] for j in g]
        b = [pos[j] for j in cols if j not in g]
        la = np.linalg.slogdet(R[np.ix_(a, a)])[1]
        lb = np.linalg.slogdet(R[np.ix_(b, b)])[1]
        out.append(num(math.exp(la + lb - logdet)))
    return out


def scaled_condition_number(X: np.ndarray) -> tuple[float | None, list[float]]:
    """Belsley, Kuh & Welsch (1980) condition number: unit-length columns, no centring, SVD.

    Returns (condition number, condition indices largest first).
    """
    norms = np.linalg.norm(X, axis=0)
    if np.any(norms == 0):
        return None, []
    sv = np.linalg.svd(X / norms, compute_uv=False)
    if sv[-1] <= sv[0] * np.finfo(float).eps:
        return None, []
    return float(sv[0] / sv[-1]), [float(sv[0] / s) for s in sv]
