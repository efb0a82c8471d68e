"""Smeared means of power-type inverses with a stated error bound.

For the families whose inverse is a power of an affine function on the region
where it is defined, g^-1(u) = beta (gamma + delta u)^p where the base is
positive, and 0 (a clip) or undefined (left out of the mean) elsewhere --
square, reciprocal, power q, Box-Cox lambda != 0 -- the smeared mean
S(eta) = mean_i g^-1(eta + e_i) (Duan 1983) is a sum of powers of bases
b_i = A + |delta| s_i (A = gamma + delta eta, s = sign(delta) e).  A group of
terms around a centre c with half-width r sums to b_c^p sum_t C(p, t) M_t rho^t,
rho = |delta| r / b_c, M_t the scaled central moments of the group: a binomial
(Taylor) series whose remainder after J terms is bounded in closed form.

* :func:`smear_power_root`: all residuals as one group, for the etas far from
  the singular point (J = 30);
* :func:`smear_power_binned`: nested bins of the sorted residuals, each bin by
  its series where the bound allows it (J = 16), the bins next to the pole,
  clip or domain cut term by term;
* :func:`exact_power`: the exact double sum (what the others are tested
  against, and used for a handful of etas).

Error bound of a series: its relative error is at most T_J(rho) / m_p(rho),
where T_J(rho) = sum_{t >= J} |C(p, t)| rho^t bounds every term's remainder and
m_p(rho) = min_{|s| <= rho} (1 + s)^p bounds the terms from below; ``rho_ok``
is the largest rho with that ratio <= the stated bound (TREE_RTOL, BIN_RTOL,
both 1e-12; found once per exponent).  All terms have the sign of beta, so the
mean has the same relative error bound (plus rounding).
"""

from __future__ import annotations

import math
from functools import lru_cache
from typing import TYPE_CHECKING

import numpy as np

from ._types import FloatArray

if TYPE_CHECKING:  # pragma: no cover
    from .transforms import Transform

TREE_RTOL = 1e-12  # bound on the Taylor remainder of every block (relative)
J = 30  # series terms per block


def _rho_ok(p: float, terms: int = J, rtol: float = TREE_RTOL) -> float:
    """Largest rho on a fixed grid in (0, 0.9] with T_J(rho) / m_p(rho) <= ``rtol``
    (J = ``terms``); 0 when no grid point meets it.  See :func:`rho_ok_many`."""
    return float(rho_ok_many(np.array([float(p)]), terms, rtol)[0])


#: rho_ok of (p, terms, rtol) found so far in this process (a pure function of them): the
#: binned paths ask for the same few exponents for every group and fold (square 0.5,
#: reciprocal -1, ladder powers); at most _KEPT_MAX values, then it starts again
_KEPT: dict[tuple[float, int, float], float] = {}
_KEPT_MAX = 4096


def rho_ok_many(p: np.ndarray, terms: int = J, rtol: float = TREE_RTOL) -> FloatArray:
    """:func:`_rho_ok` of every exponent in ``p`` at once: :func:`rho_ok_closed_form`, each
    distinct exponent found once per process (kept in ``_KEPT``)."""
    p = np.asarray(p, dtype=float)
    u, inv = np.unique(p, return_inverse=True)
    vals = np.array([_KEPT.get((x, terms, rtol), math.nan) for x in u.tolist()])
    miss = np.isnan(vals)
    if np.any(miss):
        vals[miss] = rho_ok_closed_form(u[miss], terms, rtol)
        if len(_KEPT) + int(miss.sum()) > _KEPT_MAX:
            _KEPT.clear()
        for x, v in zip(u[miss].tolist(), vals[miss].tolist(), strict=True):
            _KEPT[(x, terms, rtol)] = v
    out: FloatArray = vals[inv].reshape(p.shape)
    return out


def rho_ok_closed_form(p: np.ndarray, terms: int = J, rtol: float = TREE_RTOL) -> FloatArray:
    """:func:`_rho_ok` of every exponent in ``p`` at once, in closed form.

    T_J(rho) = sum_{t >= J} |C(p, t)| rho^t.  For t >= J the ratio of consecutive
    coefficients |C(p, t+1) / C(p, t)| = |t - p| / (t + 1) is at most (t + |p|) / (t + 1)
    <= q = max(1, (J + |p|) / (J + 1)), so T_J(rho) <= |C(p, J)| rho^J / (1 - q rho) when
    q rho < 1 (a geometric series; for a polynomial of degree >= J the terms past the
    degree are 0, so the bound still holds).  m_p(rho) = min_{|s| <= rho} (1 + s)^p is
    (1 - rho)^p for p > 0 and (1 + rho)^p for p < 0.  Every factor grows with rho, so the
    condition holds on a prefix of the grid; the answer is the last grid point of that
    prefix.  A polynomial of degree < J (p a whole number below J) has no remainder: 0.9.
    """
    p = np.asarray(p, dtype=float)
    poly = (p >= 0) & (np.abs(p - np.round(p)) < 1e-12)
    j = np.arange(terms)
    ap = np.abs(p)
    # log |C(p, J)| = sum_{j < J} log |p - j| - log J!
    logc = np.sum(np.log(np.maximum(np.abs(p[:, None] - j), 1e-300)), axis=1) - math.lgamma(
        terms + 1
    )
    q = np.maximum(1.0, (terms + ap) / (terms + 1))
    rho = _RHO_GRID[None, :]
    qr = q[:, None] * rho
    with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
        log_m = np.where(p[:, None] > 0, p[:, None] * np.log1p(-rho), p[:, None] * np.log1p(rho))
        # log(1 - q rho) where the geometric bound converges, -inf (bound infinite) elsewhere
        geo = np.where(qr < 1.0, np.log1p(-np.where(qr < 1.0, qr, 0.0)), -np.inf)
        lhs = logc[:, None] + terms * np.log(rho) - geo - log_m
    ok = (qr < 1.0) & (lhs <= math.log(rtol))
    first_bad = np.where(ok.all(axis=1), _RHO_GRID.size, np.argmin(ok, axis=1))
    out = np.where(first_bad == 0, 0.0, _RHO_GRID[np.maximum(first_bad - 1, 0)])
    out = np.where(poly & (np.round(p) < terms), 0.9, out)
    return np.asarray(out, dtype=float)


_RHO_GRID = np.geomspace(1e-9, 0.9, 160)


@lru_cache(maxsize=256)
def _binom_row(p: float, terms: int = J) -> np.ndarray:
    """C(p, t) for t < ``terms`` (signed)."""
    out = np.empty(terms)
    out[0] = 1.0
    for j in range(1, terms):
        out[j] = out[j - 1] * (p - (j - 1)) / j
    return out


def _powers(x: np.ndarray, k: int) -> np.ndarray:
    """x^0 .. x^(k-1) along a new last axis."""
    out = np.empty((*x.shape, k))
    out[..., 0] = 1.0
    out[..., 1:] = x[..., None]
    np.cumprod(out[..., 1:], axis=-1, out=out[..., 1:])
    return out


def _moment_sums(u: np.ndarray, k: int) -> np.ndarray:
    """sum_i u[g, i]^t for t < k, one row per g: the powers one at a time (each a pass over
    u), not all k of them held at once."""
    out = np.empty((u.shape[0], k))
    out[:, 0] = u.shape[1]
    acc = u.copy()
    for t in range(1, k):
        out[:, t] = acc.sum(axis=1)
        if t + 1 < k:
            acc *= u
    return out


def power_form(t: Transform) -> tuple[float, float, float, float, bool] | None:
    """(beta, gamma, delta, p, outside_zero) when g^-1 is a power of an affine map, else None."""
    n = t.name
    if n == "square":
        return 1.0, 0.0, 1.0, 0.5, True
    if n == "reciprocal":
        return 1.0, 0.0, 1.0, -1.0, False
    if n == "power" and t.exponent:
        q = float(t.exponent)
        return 1.0, 0.0, 1.0, 1.0 / q, q > 0
    if n == "box_cox" and t.lam is not None and abs(t.lam) >= 1e-12:
        lam = float(t.lam)
        return 1.0, 1.0, lam, 1.0 / lam, lam > 0
    return None


def smear_power_root(
    eta: np.ndarray, e: np.ndarray, beta: float, gamma: float, delta: float, p: float
) -> tuple[np.ndarray, np.ndarray]:
    """The tree's root block alone: (means, done) for the etas whose every term is defined and
    whose relative distance to the singular point is at most ``rho_ok`` (same error bound)."""
    eta = np.asarray(eta, dtype=float)
    e = np.asarray(e, dtype=float)
    lo, hi = float(e.min()), float(e.max())
    c, r = 0.5 * (lo + hi), 0.5 * (hi - lo)
    rs = r if r > 0 else 1.0
    ad = abs(delta)
    base = gamma + delta * (eta + c)  # base at the centre, for delta of either sign
    with np.errstate(divide="ignore", invalid="ignore"):
        rho = ad * r / base
    done = (base > 0) & (rho <= _rho_ok(float(p)))
    out = np.full(eta.size, np.nan)
    if np.any(done):  # the moments only when some eta takes the series
        M = _powers((e - c) / rs, J).sum(axis=0)
        sgn = np.sign(delta)
        cp = _binom_row(float(p)) * sgn ** np.arange(J)  # (1 + x u)^p with x = delta r / base
        series = _powers(rho[done], J) @ (cp * M)
        out[done] = beta * np.power(base[done], p) * series / e.size
    return out, done


#: a group's etas left by the root series are summed exactly (one double sum for all such
#: groups at once) up to this many terms, and by the binned series above it
GROUP_EXACT_CELLS = 1 << 16
_MANY_CELLS = 1 << 20  # terms per block of the many-group double sum (8 MB of floats)


def smear_power_many(
    eta: np.ndarray,
    e: np.ndarray,
    beta: np.ndarray,
    gamma: np.ndarray,
    delta: np.ndarray,
    p: np.ndarray,
    outside_zero: np.ndarray,
) -> FloatArray:
    """Smeared means of G groups at once: row g is mean_i beta_g (gamma_g + delta_g (eta[g, j]
    + e[g, i]))^p_g over the defined terms, for etas ``eta`` (G, m) and residuals ``e`` (G, n),
    each group with its own power form (arrays of G; :func:`power_form`), with the semantics
    of :func:`exact_power`.

    Per group the same sums as one call per group: the root series where
    :func:`smear_power_root` takes an eta (same arithmetic, every group's moments in one
    array); the other etas exactly, term by term, in one double sum over all groups
    (:func:`exact_power`'s clip and count rules) while a group's part has at most
    ``GROUP_EXACT_CELLS`` terms, else by :func:`smear_power_binned` (at least
    ``BINNED_MIN_ETAS`` etas) or :func:`exact_power` for that group alone.  The error bound
    is theirs: at most 1e-12 relative plus rounding where a series is used, rounding alone
    where the terms are summed.
    """
    eta = np.asarray(eta, dtype=float)
    e = np.asarray(e, dtype=float)
    G, m = eta.shape
    n = e.shape[1]
    out = np.full((G, m), np.nan)
    if G == 0 or m == 0 or n == 0:
        return out
    beta, gamma, delta, p = (np.asarray(v, dtype=float) for v in (beta, gamma, delta, p))
    zero = np.asarray(outside_zero, dtype=bool)
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        lo, hi = e.min(axis=1), e.max(axis=1)
        c, r = 0.5 * (lo + hi), 0.5 * (hi - lo)
        rs = np.where(r > 0, r, 1.0)
        ad = np.abs(delta)
        base = gamma[:, None] + delta[:, None] * (eta + c[:, None])
        rho = (ad * r)[:, None] / base
        ok = _rho_ok_many(p)
        done = (base > 0) & (rho <= ok[:, None])
        gs = np.flatnonzero(done.any(axis=1))
        if gs.size:
            M = _moment_sums((e[gs] - c[gs, None]) / rs[gs, None], J)  # (Gd, J)
            cp = _binom_rows(p[gs], J) * np.sign(delta[gs])[:, None] ** np.arange(J)
            coef = cp * M
            where = np.full(G, -1, dtype=np.intp)
            where[gs] = np.arange(gs.size)
            gi, ji = np.nonzero(done)
            series = np.einsum("pj,pj->p", _powers(rho[gi, ji], J), coef[where[gi]])
            out[gi, ji] = beta[gi] * np.power(base[gi, ji], p[gi]) * series / n
        rest = ~done
        left = rest.sum(axis=1)
        pairs = (left > 0) & (left * n <= GROUP_EXACT_CELLS)
        for g in np.flatnonzero((left > 0) & ~pairs).tolist():
            er = eta[g, rest[g]]
            form = (float(beta[g]), float(gamma[g]), float(delta[g]), float(p[g]), bool(zero[g]))
            if er.size >= BINNED_MIN_ETAS:
                out[g, rest[g]] = smear_power_binned(er, e[g], *form)
            else:
                out[g, rest[g]] = exact_power(er, e[g], *form)
        gi, ji = np.nonzero(rest & pairs[:, None])
        if gi.size and n >= 2 * PAIR_BIN and gi.size * n >= BINNED_PAIRS_MIN_CELLS:
            # every group's etas left, by the binned series (past its fixed cost)
            out[gi, ji] = _binned_pairs(gi, eta[gi, ji], e, beta, gamma, delta, p, zero)
            return out
        step = max(1, _MANY_CELLS // n)
        for a in range(0, gi.size, step):
            gg, jj = gi[a : a + step], ji[a : a + step]
            out[gg, jj] = _exact_pairs(
                gamma[gg] + delta[gg] * eta[gg, jj],
                delta[gg, None] * e[gg],
                beta[gg],
                p[gg],
                zero[gg],
            )
    return out


PAIR_BIN = 16  # residuals per bin of the many-group binned path
#: fewer (eta, residual) terms than this are summed exactly: the binned path's fixed cost
#: (sorting, bins, moments) is then larger than the double sum
BINNED_PAIRS_MIN_CELLS = 1 << 15  # break-even measured about 29,000 terms
_PAIR_CELLS = 1 << 18  # (eta, bin, term) cells per block of that path (2 MB of floats)


@np.errstate(over="ignore", invalid="ignore", divide="ignore")
def _binned_pairs(
    gi: np.ndarray,
    eta: np.ndarray,
    e: np.ndarray,
    beta: np.ndarray,
    gamma: np.ndarray,
    delta: np.ndarray,
    p: np.ndarray,
    zero: np.ndarray,
) -> FloatArray:
    """Smeared means of single etas of many groups (``eta[q]`` of group ``gi[q]``, residuals
    ``e`` (G, n), the power forms of :func:`smear_power_many`), by one level of bins of
    PAIR_BIN consecutive sorted residuals per group, every group at once: the bins'
    scaled moments once per group, each (eta, bin) by its series (BIN_J terms) where the
    bound allows it, term by term where it does not (next to a pole, a clip or a domain
    cut), nothing where no term of the bin is defined.

    The arithmetic and bound are :func:`smear_power_binned`'s one level: bin k of sorted
    s = sign(delta) e has centre c_k, half-width r_k and moments M_kt = sum ((s_i - c_k) /
    r_k)^t; its terms sum to b_c^p sum_t C(p, t) M_kt rho^t with b_c = A + |delta| c_k and
    rho = |delta| r_k / b_c, taken where the bin's lowest base is positive and rho is at
    most :func:`_rho_ok` (p, BIN_J, BIN_RTOL): the remainder is at most BIN_RTOL (1e-12) of
    the bin's sum, all terms of one sign, so the mean's relative error is at most 1e-12
    plus rounding.  A term's base is A + |delta| s_i, the same floating-point value as the
    exact sum's A + delta e_i, so the defined terms are the ones :func:`exact_power`
    counts.  Overflow gives inf, as in the exact sum (callers treat it as undefined)."""
    n = e.shape[1]
    L = PAIR_BIN
    used, inv = np.unique(gi, return_inverse=True)
    nb = -(-n // L)
    pad = np.full((used.size, nb * L), -np.inf)  # a padded slot: never a defined term
    sgn = np.where(delta[used] > 0, 1.0, -1.0)
    pad[:, :n] = np.sort(sgn[:, None] * e[used], axis=1)
    S = pad.reshape(used.size, nb, L)
    member = np.isfinite(S)
    cnt = member.sum(axis=2)
    last = np.maximum(cnt - 1, 0)
    lo = S[:, :, 0]
    hi = np.take_along_axis(S, last[:, :, None], axis=2)[:, :, 0]
    c = 0.5 * (lo + hi)
    r = 0.5 * (hi - lo)
    rs = np.where(r > 0, r, 1.0)
    u = np.where(member, (S - c[:, :, None]) / rs[:, :, None], 0.0)  # 0 in a padded slot
    mom = np.empty((BIN_J, used.size, nb))
    mom[0] = cnt
    ut = np.ascontiguousarray(u.transpose(2, 0, 1))  # (L, groups, bins): sums over axis 0
    acc = ut.copy()
    for t in range(1, BIN_J):  # scaled moments sum u^t, one power at a time
        mom[t] = acc.sum(axis=0)
        acc *= ut
    # (BIN_J, groups x bins): C(p, t) M_kt, each power's table contiguous for the gathers
    coef = (mom * _binom_rows(p[used], BIN_J).T[:, :, None]).reshape(BIN_J, -1)
    pu, pinv = np.unique(p[used], return_inverse=True)
    rho_ok = rho_ok_many(pu, BIN_J, BIN_RTOL)[pinv]
    one_p = float(pu[0]) if pu.size == 1 else None  # one exponent: the cheaper ufunc
    ad = np.abs(delta[used])
    P = eta.size
    total = np.zeros(P)
    count = np.zeros(P)
    step = max(1, _PAIR_CELLS // (nb * 8))  # a few (etas, bins) arrays at once
    for a in range(0, P, step):
        q = np.arange(a, min(P, a + step))
        g = inv[q]
        A = (gamma[gi[q]] + delta[gi[q]] * eta[q])[:, None]
        d = ad[g][:, None]
        bc = A + d * c[g]
        rho = d * r[g] / bc
        series = (A + d * lo[g] > 0) & (rho <= rho_ok[g][:, None])
        si, sb = np.nonzero(series)  # the (eta, bin) cells the series takes
        cell = g[si] * nb + sb
        x = rho[si, sb]
        acc = coef[BIN_J - 1][cell]
        for t in range(BIN_J - 2, -1, -1):  # Horner in rho
            acc *= x
            acc += coef[t][cell]
        pg = p[gi[q]][:, None]
        bcs = bc[si, sb]
        acc *= _pow(bcs, one_p) if one_p is not None else np.power(bcs, pg[si, 0])
        total[q] = np.bincount(si, weights=acc, minlength=q.size)
        count[q] = np.bincount(si, weights=cnt[g[si], sb], minlength=q.size)
        # bins the series cannot take that hold a defined term: term by term
        ei, bi = np.nonzero(~series & (A + d * hi[g] > 0))
        if ei.size:
            base = A[ei] + d[ei] * S[g[ei], bi]  # (pairs, L)
            ok = base > 0
            bs = np.where(ok, base, 1.0)
            v = _pow(bs, one_p) if one_p is not None else np.power(bs, pg[ei])
            total[q] += np.bincount(ei, weights=np.where(ok, v, 0.0).sum(axis=1), minlength=q.size)
            count[q] += np.bincount(ei, weights=ok.sum(axis=1), minlength=q.size)
    cnt_all = np.where(zero[gi], float(n), count)
    out: FloatArray = np.where(cnt_all > 0, beta[gi] * total / np.maximum(cnt_all, 1.0), np.nan)
    return out


BINNED_MIN_ETAS = 16  # below this many etas the exact sum costs less than building the bins


def _exact_pairs(
    A: np.ndarray, de: np.ndarray, beta: np.ndarray, p: np.ndarray, zero: np.ndarray
) -> FloatArray:
    """Row q: mean of beta_q (A_q + de[q, i])^p_q over its defined terms (the rules of
    :func:`exact_power`: a clipped term is 0 and counts, an undefined one is left out)."""
    buf = A[:, None] + de
    ok = buf > 0
    np.maximum(buf, 0.0, out=buf)
    n = de.shape[1]
    cnt = np.where(zero, float(n), ok.sum(axis=1).astype(float))
    buf[~ok & ~zero[:, None]] = 1.0
    u = np.unique(p)
    if u.size == 1:
        buf = _pow(buf, float(u[0]))
    else:
        np.power(buf, p[:, None], out=buf)
    buf[~ok & ~zero[:, None]] = 0.0
    tot = buf.sum(axis=1) * beta
    return np.where(cnt > 0, tot / np.maximum(cnt, 1.0), np.nan)


def _rho_ok_many(p: np.ndarray) -> np.ndarray:
    """:func:`_rho_ok` (J terms, TREE_RTOL) of every exponent in ``p``."""
    return rho_ok_many(p, J, TREE_RTOL)


def _binom_rows(p: np.ndarray, terms: int) -> np.ndarray:
    """C(p_g, t) for t < ``terms``, one row per exponent (:func:`_binom_row`'s recurrence)."""
    out = np.empty((p.size, terms))
    out[:, 0] = 1.0
    for j in range(1, terms):
        out[:, j] = out[:, j - 1] * (p - (j - 1)) / j
    return out


_CHUNK = 1 << 15  # elements per block of the double sum (fits in cache)


def exact_power(
    eta: np.ndarray,
    e: np.ndarray,
    beta: float,
    gamma: float,
    delta: float,
    p: float,
    outside_zero: bool,
) -> np.ndarray:
    """The exact double sum for a power-form inverse (same semantics as smear_power_binned)."""
    eta = np.asarray(eta, dtype=float)
    e = np.asarray(e, dtype=float)
    n = e.size
    out = np.empty(eta.size)
    step = max(1, _CHUNK // max(n, 1))
    de = delta * e
    for a in range(0, eta.size, step):
        A = gamma + delta * eta[a : a + step]
        buf = np.add.outer(A, de)
        if outside_zero:
            np.maximum(buf, 0.0, out=buf)
            cnt = float(n)
        else:
            ok = buf > 0
            cnt = ok.sum(axis=1).astype(float)
            buf[~ok] = 1.0
        with np.errstate(over="ignore", divide="ignore"):
            if p == 0.5:
                np.sqrt(buf, out=buf)
            elif p == -1.0:
                np.reciprocal(buf, out=buf)
            elif p == 2.0:
                np.multiply(buf, buf, out=buf)
            else:
                np.power(buf, p, out=buf)
        if not outside_zero:
            buf[~ok] = 0.0
        tot = buf.sum(axis=1) * beta
        with np.errstate(invalid="ignore", divide="ignore"):
            out[a : a + step] = np.where(np.asarray(cnt) > 0, tot / np.maximum(cnt, 1.0), np.nan)
    return out


BIN_RTOL = 1e-12  # bound on the remainder of every binned series (relative)
BIN_J = 16  # series terms per bin
BIN_LEAF = 32  # residuals per finest bin (summed exactly where its series is not allowed)
BIN_SPLIT = 8  # finer bins per bin
BIN_TOP = 64  # at most this many bins at the coarsest level
_BIN_ETAS = 1024  # etas per block of the binned path


def bin_sizes(n: int) -> list[int]:
    """Residuals per bin at each level of the binned path, coarsest first: BIN_LEAF times
    powers of BIN_SPLIT, the coarsest with at most BIN_TOP bins."""
    sizes = [BIN_LEAF]
    while -(-n // sizes[0]) > BIN_TOP:
        sizes.insert(0, sizes[0] * BIN_SPLIT)
    return sizes


class _Bins:
    """Bins of sorted values at every level: bounds, counts and series coefficients."""

    def __init__(self, s: np.ndarray, p: float, sizes: list[int]):
        n = s.size
        top = sizes[0]
        size = -(-n // top) * top
        pad = np.full(size, -np.inf)  # a padded slot has base -inf: never a defined term
        pad[:n] = s
        self.pad = pad
        self.sizes = sizes
        self.n = n
        cp = _binom_row(float(p), BIN_J)
        self.lo, self.hi, self.c, self.r, self.cnt, self.coef = [], [], [], [], [], []
        for L in sizes:
            S = pad.reshape(-1, L)
            member = np.isfinite(S)
            cnt = member.sum(axis=1)
            last = np.maximum(cnt - 1, 0)
            lo = np.where(cnt > 0, S[:, 0], 0.0)
            hi = np.where(cnt > 0, S[np.arange(S.shape[0]), last], 0.0)
            c = 0.5 * (lo + hi)
            r = 0.5 * (hi - lo)
            lo = np.where(cnt > 0, lo, -np.inf)  # an empty bin: no defined term, no series
            hi = np.where(cnt > 0, hi, -np.inf)
            rs = np.where(r > 0, r, 1.0)
            u = np.where(member, (S - c[:, None]) / rs[:, None], 0.0)  # 0 in a padded slot
            mom = np.empty((BIN_J, S.shape[0]))
            mom[0] = cnt
            acc = u.copy()
            for t in range(1, BIN_J):  # scaled moments sum u^t, one power at a time
                mom[t] = acc.sum(axis=1)
                acc *= u
            self.lo.append(lo)
            self.hi.append(hi)
            self.c.append(c)
            self.r.append(r)
            self.cnt.append(cnt)
            self.coef.append(np.ascontiguousarray(mom * cp[:, None]))  # (J, bins): C(p,t) M


def smear_power_binned(
    eta: np.ndarray,
    e: np.ndarray,
    beta: float,
    gamma: float,
    delta: float,
    p: float,
    outside_zero: bool,
) -> np.ndarray:
    """mean_i of beta (gamma + delta (eta + e_i))^p over the defined terms (base > 0), from
    nested bins of the sorted residuals (the semantics of :func:`exact_power`).

    The sorted values s = sign(delta) e are cut into bins of consecutive values at a few
    levels (:func:`bin_sizes`: BIN_LEAF = 32 values per finest bin, BIN_SPLIT = 8 finer bins
    per bin, at most BIN_TOP = 64 bins at the top).  Bin k has centre c_k, half-width r_k and
    scaled moments M_kt = sum_{i in k} ((s_i - c_k)/r_k)^t, t < BIN_J, computed once.  For
    an eta the base of a term is b_i = A + |delta| s_i with A = gamma + delta eta, and a
    bin's terms sum to

        beta b_c^p sum_i (1 + rho u_i)^p = beta b_c^p sum_t C(p, t) M_kt rho^t + remainder,

    with b_c = A + |delta| c_k, rho = |delta| r_k / b_c and u_i in [-1, 1].  A bin whose lowest
    base is positive and whose rho is at most ``rho_ok`` = :func:`_rho_ok` (p, BIN_J,
    BIN_RTOL) is summed by that series (Horner in rho); its remainder is at most
    T_J(rho) / m_p(rho) <= BIN_RTOL of the bin's sum, where T_J(rho) = sum_{t >= BIN_J}
    |C(p, t)| rho^t bounds every term's remainder (|u_i| <= 1) and m_p(rho) = min over
    |x| <= rho of (1 + x)^p bounds each term from below.  A bin that fails the test and
    holds a defined term (next to the pole, the clip or the domain cut, or too wide for its
    distance from it) is tried as its finer bins; a finest bin that fails is summed exactly,
    term by term, as :func:`exact_power` does.  A bin whose highest base is <= 0 holds no
    defined term (clipped to 0 or left out of the mean).  The rounded base of a term is
    monotone in s, so the defined terms are the ones :func:`exact_power` counts.

    Error bound: all terms have the sign of beta, so the mean's relative error is at most
    BIN_RTOL (1e-12) plus rounding: the series adds a few units of 1e-16 relative, and
    both this path and the exact sum round each base A + |delta| s_i, whose relative error
    eps (|A| + |delta s_i|) / b_i is multiplied by |p| in the term.
    """
    eta = np.asarray(eta, dtype=float)
    e = np.asarray(e, dtype=float)
    n, m = e.size, eta.size
    out = np.full(m, np.nan)
    if n == 0 or m == 0:
        return out
    ad = abs(delta)
    bins = _Bins(np.sort((1.0 if delta > 0 else -1.0) * e), p, bin_sizes(n))
    rho_ok = _rho_ok(float(p), BIN_J, BIN_RTOL)
    for a in range(0, m, _BIN_ETAS):
        A = gamma + delta * eta[a : a + _BIN_ETAS]
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            total, count = _binned_block(A, ad, bins, rho_ok, beta, p, clip=outside_zero)
            if outside_zero:
                count = np.full(A.size, float(n))
            out[a : a + _BIN_ETAS] = np.where(count > 0, total / np.maximum(count, 1.0), np.nan)
    return out


def _binned_block(
    A: np.ndarray,
    ad: float,
    bins: _Bins,
    rho_ok: float,
    beta: float,
    p: float,
    win: tuple[np.ndarray, np.ndarray] | None = None,
    clip: bool = False,
) -> tuple[np.ndarray, np.ndarray]:
    """(sum of the defined terms, their number) for each A of one block of etas: every
    (eta, top bin) pair on a dense grid, the failed pairs' finer bins as lists of pairs.
    ``win`` = (lo, hi): only the sorted positions lo <= i < hi of each eta take part.
    ``clip`` (p > 0, no window): a term whose base is <= 0 is 0 and every term counts, so
    the number is not tallied (zeros are returned in its place)."""
    assert not (clip and (win is not None or p <= 0))
    m = A.size
    L0 = bins.sizes[0]
    # the top level on the dense (etas, bins) grid: broadcasting, no gathers
    bc = A[:, None] + ad * bins.c[0][None, :]
    rho = (ad * bins.r[0])[None, :] / bc
    series = (A[:, None] + ad * bins.lo[0][None, :] > 0) & (rho <= rho_ok)
    rest = A[:, None] + ad * bins.hi[0][None, :] > 0
    if win is not None:
        first = np.arange(bins.lo[0].size) * L0
        last = np.minimum(first + L0, bins.n)
        series &= (first[None, :] >= win[0][:, None]) & (last[None, :] <= win[1][:, None])
        rest &= (last[None, :] > win[0][:, None]) & (first[None, :] < win[1][:, None])
    x = np.where(series, rho, 0.0)
    coef = bins.coef[0]
    acc = np.empty_like(x)
    acc[:] = coef[-1][None, :]
    for t in range(BIN_J - 2, -1, -1):  # Horner in rho
        acc *= x
        acc += coef[t][None, :]
    acc *= _pow(np.where(series, bc, 1.0), p)
    total = np.where(series, acc, 0.0).sum(axis=1)
    count = np.zeros(m) if clip else (series * bins.cnt[0][None, :]).sum(axis=1).astype(float)
    ei, bi = np.nonzero(~series & rest)
    for lev in range(1, len(bins.sizes) + 1):
        if ei.size == 0:
            break
        L = bins.sizes[lev - 1]
        if lev == len(bins.sizes):  # the failed finest bins: term by term
            base = A[ei][:, None] + ad * bins.pad.reshape(-1, L)[bi]
            if clip:  # max(base, 0)^p: 0 for a clipped term and for a padded slot
                v = _pow(np.maximum(base, 0.0, out=base), p).sum(axis=1)
                total += np.bincount(ei, weights=v, minlength=m)
                break
            ok = base > 0
            if win is not None:
                pos = bi[:, None] * L + np.arange(L)[None, :]
                ok &= (pos >= win[0][ei][:, None]) & (pos < win[1][ei][:, None])
            v = np.where(ok, _pow(np.where(ok, base, 1.0), p), 0.0).sum(axis=1)
            total += np.bincount(ei, weights=v, minlength=m)
            count += np.bincount(ei, weights=ok.sum(axis=1), minlength=m)
            break
        g = L // bins.sizes[lev]
        ei = np.repeat(ei, g)  # the finer bins of the failed ones
        bi = (bi[:, None] * g + np.arange(g)[None, :]).ravel()
        Ae = A[ei]
        bc = Ae + ad * bins.c[lev][bi]
        rho = ad * bins.r[lev][bi] / bc
        series = (Ae + ad * bins.lo[lev][bi] > 0) & (rho <= rho_ok)
        rest = Ae + ad * bins.hi[lev][bi] > 0
        if win is not None:
            first = bi * bins.sizes[lev]
            last = np.minimum(first + bins.sizes[lev], bins.n)
            wl, wh = win[0][ei], win[1][ei]
            series &= (first >= wl) & (last <= wh)
            rest &= (last > wl) & (first < wh)
        if np.any(series):
            es, bs, xs = ei[series], bi[series], rho[series]
            coef = bins.coef[lev]
            acc = coef[-1][bs]
            for t in range(BIN_J - 2, -1, -1):
                acc *= xs
                acc += coef[t][bs]
            acc *= _pow(bc[series], p)
            total += np.bincount(es, weights=acc, minlength=m)
            if not clip:
                count += np.bincount(es, weights=bins.cnt[lev][bs], minlength=m)
        rest &= ~series
        ei, bi = ei[rest], bi[rest]
    return total * beta, count


def _pow(x: FloatArray, p: float) -> FloatArray:
    """x ** p with the cheaper ufunc for the common exponents (as :func:`exact_power`)."""
    out: FloatArray
    if p == 0.5:
        out = np.sqrt(x)
    elif p == -1.0:
        out = np.reciprocal(x)
    elif p == 2.0:
        out = x * x
    else:
        out = np.power(x, p)
    return out


def smear_yeo_johnson(eta: np.ndarray, e: np.ndarray, lam: float) -> FloatArray:
    """mean_i of the Yeo-Johnson inverse at eta + e_i over the defined terms (Yeo & Johnson
    2000), by the binned series of each branch (``nan`` where no term is defined).

    The inverse is two power forms joined at z = 0: for z >= 0, (1 + lam z)^(1/lam) - 1
    (expm1(z) at lam = 0; undefined past the pole z = -1/lam when lam < 0), for z < 0,
    1 - (1 - (2 - lam) z)^(1/(2 - lam)) (-expm1(-z) at lam = 2; undefined below
    z = -1/(lam - 2) when lam > 2).  With the residuals sorted, the terms with z >= 0 are
    a suffix (e_i >= -eta), so each branch is :func:`smear_power_binned`'s sum restricted
    to a window of sorted positions: bins inside the window by their series where the
    bound allows it, bins cut by the window or next to a pole term by term.  An exp
    branch is exp(eta) times prefix (or suffix) sums of exp(e_i), exactly.

    Error bound: within a branch every term is +-(1 + |y_i|) -+ 1 with the power part
    1 + |y_i| = base^p of one sign, so the series' error is at most BIN_RTOL (1e-12) of
    the sum of 1 + |y_i|: |error of the mean| <= 1e-12 mean_i (1 + |y_i|) plus rounding
    (each base's rounding times |p|, as for the other power forms).  The mean itself can be
    near 0 (terms of both signs); the bound is absolute on that scale.
    """
    eta = np.asarray(eta, dtype=float)
    e = np.asarray(e, dtype=float)
    n, m = e.size, eta.size
    out = np.full(m, np.nan)
    if n == 0 or m == 0:
        return out
    es = np.sort(e)
    total = np.zeros(m)
    count = np.zeros(m)
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        k0 = np.searchsorted(es, -eta, side="left")  # e_i >= -eta (z >= 0) from k0 on
        # z >= 0
        if abs(lam) < 1e-12:  # expm1(z): exp(eta) sum exp(e_i) over the suffix
            top = es[-1]
            suf = np.concatenate([np.cumsum(np.exp(es - top)[::-1])[::-1], [0.0]])
            total += np.exp(eta + top) * suf[k0] - (n - k0)
            count += n - k0
        else:
            win = (k0, np.full(m, n)) if lam > 0 else (np.zeros(m, np.intp), n - k0)
            t, c = _windowed(eta, es, 1.0, 1.0, lam, 1.0 / lam, win)
            total += t - c
            count += c
        # z < 0
        if abs(lam - 2.0) < 1e-12:  # -expm1(-z): count - exp(-eta) sum exp(-e_i), prefix
            bot = es[0]
            pre = np.concatenate([[0.0], np.cumsum(np.exp(bot - es))])
            total += k0 - np.exp(-eta - bot) * pre[k0]
            count += k0
        else:
            win = (n - k0, np.full(m, n)) if lam < 2.0 else (np.zeros(m, np.intp), k0)
            t, c = _windowed(eta, es, -1.0, 1.0, lam - 2.0, 1.0 / (2.0 - lam), win)
            total += t + c
            count += c
        out = np.where(count > 0, total / np.maximum(count, 1.0), np.nan)
    return out


def _windowed(
    eta: np.ndarray,
    es: np.ndarray,
    beta: float,
    gamma: float,
    delta: float,
    p: float,
    win: tuple[np.ndarray, np.ndarray],
) -> tuple[np.ndarray, np.ndarray]:
    """(sum, number) of the defined terms beta (gamma + delta (eta + e_i))^p over the
    sorted positions of s = sign(delta) e in each eta's window (``es``: e sorted)."""
    s = es if delta > 0 else -es[::-1]
    ad = abs(delta)
    bins = _Bins(s, p, bin_sizes(s.size))
    rho_ok = _rho_ok(float(p), BIN_J, BIN_RTOL)
    total = np.empty(eta.size)
    count = np.empty(eta.size)
    for a in range(0, eta.size, _BIN_ETAS):
        sl = slice(a, a + _BIN_ETAS)
        A = gamma + delta * eta[sl]
        total[sl], count[sl] = _binned_block(A, ad, bins, rho_ok, beta, p, (win[0][sl], win[1][sl]))
    return total, count
