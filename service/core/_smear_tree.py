"""Smeared means of power-type inverses in O((m + n) log n) with a stated error bound.

For the families whose inverse is a power of an affine function on the region
where it is defined, g^-1(u) = beta (gamma + delta u)^p where the base is
positive, and 0 (a clip) or undefined (left out of the mean) elsewhere --
square, reciprocal, power q, Box-Cox lambda != 0 -- the smeared mean
S(eta) = mean_i g^-1(eta + e_i) is computed from a binary tree over the
sorted residuals (a one-dimensional tree code):

* every block of the tree stores its centre c, half-width r and scaled central
  moments sum_i ((s_i - c)/r)^t, t < J (s = sign(delta) e, so the defined terms
  are a suffix of the sorted s);
* for each eta the defined suffix is split into O(log n) aligned blocks; a
  block whose relative distance rho = |delta| r / base(c) to the singular point
  is at most ``rho_ok`` is summed by its J-term binomial (Taylor) series,
  otherwise its two children are tried; leaves that still fail are summed
  exactly.

Error bound: a Taylor-summed block's relative error is at most
T_J(rho) / m_p(rho), where T_J(rho) = sum_{t >= J} |C(p, t)| rho^t bounds every
term's remainder and m_p(rho) = min_{|s| <= rho} (1 + s)^p bounds the terms from
below; ``rho_ok`` is the largest rho with that ratio <= ``TREE_RTOL`` (found
once per exponent).  All terms have the sign of beta, so the mean has the same
relative error bound (plus rounding).
"""

from __future__ import annotations

import math
from functools import lru_cache
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:  # pragma: no cover
    from .transforms import Transform

TREE_RTOL = 1e-12  # bound on the Taylor remainder of every block (relative)
J = 30  # series terms per block
LEAF = 16  # residuals per leaf


def _rho_ok(p: float) -> float:
    """Largest rho in (0, 0.9] with T_J(rho) / m_p(rho) <= TREE_RTOL.

    T_J(rho) = sum_{t >= J} |C(p, t)| rho^t: the terms up to t0 = max(J, |p| + 1)
    are summed, the rest bounded by a geometric series with ratio rho q, where
    q = max(1, (t0 - p) / (t0 + 1)) bounds |C(p, t+1) / C(p, t)| = |t - p| / (t + 1)
    for every t >= t0.
    """
    return _rho_ok_cached(round(float(p), 12))


@lru_cache(maxsize=4096)
def _rho_ok_cached(p: float) -> float:
    poly = p >= 0 and abs(p - round(p)) < 1e-12
    if poly and round(p) < J:
        return 0.9  # a polynomial of degree < J: the series is exact
    # a polynomial of degree >= J: terms J..p, nothing after
    t0 = round(p) if poly else max(J, math.ceil(abs(p)) + 1)
    j = np.arange(t0)
    acc = np.concatenate([[0.0], np.cumsum(np.log(np.maximum(np.abs(p - j), 1e-300) / (j + 1)))])
    logs = acc[J : t0 + 1]  # log |C(p, t)| for t = J .. t0
    q = max(1.0, (t0 - p) / (t0 + 1))
    ok = np.empty(_RHO_GRID.size, dtype=bool)
    # rows of the grid in blocks of at most _MAX_CELLS cells: memory stays bounded for any p
    step = max(1, _MAX_CELLS // len(logs))
    powers_t = (J + np.arange(len(logs)))[None, :]
    for a in range(0, _RHO_GRID.size, step):
        rho = _RHO_GRID[a : a + step]
        expo = np.asarray(logs)[None, :] + powers_t * np.log(rho)[:, None]
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            terms = np.exp(np.minimum(expo, 700.0))
            tail = terms[:, :-1].sum(axis=1)
            last = terms[:, -1]
            tail = tail + (last if poly else np.where(rho * q < 1, last / (1.0 - rho * q), np.inf))
            tail = np.where(np.max(expo, axis=1) > 700, np.inf, tail)
            m = (1.0 - rho) ** p if p > 0 else (1.0 + rho) ** p
            ok[a : a + step] = tail / m <= TREE_RTOL
        del expo, terms
    rho = _RHO_GRID
    if not ok[0]:
        return 0.0
    bad = np.flatnonzero(~ok)
    return float(rho[bad[0] - 1] if bad.size else rho[-1])


_RHO_GRID = np.geomspace(1e-9, 0.9, 160)
_MAX_CELLS = 1 << 18  # 2 MB per temporary array of the remainder bound


@lru_cache(maxsize=256)
def _binom_row(p: float) -> np.ndarray:
    """C(p, t) for t < J (signed)."""
    out = np.empty(J)
    out[0] = 1.0
    for j in range(1, J):
        out[j] = out[j - 1] * (p - (j - 1)) / j
    return out


_FACT = np.array([float(math.factorial(t)) for t in range(J)])
_INV_FACT = 1.0 / _FACT


def _powers(x: np.ndarray, k: int) -> np.ndarray:
    """x^0 .. x^(k-1) along a new last axis."""
    out = np.empty((*x.shape, k))
    out[..., 0] = 1.0
    out[..., 1:] = x[..., None]
    np.cumprod(out[..., 1:], axis=-1, out=out[..., 1:])
    return out


class _Tree:
    """Blocks over sorted values s (n,): centre, half-width, count and scaled moments."""

    def __init__(self, s: np.ndarray):
        n = s.size
        self.s = s
        nl = max(1, -(-n // LEAF))
        levels = max(1, math.ceil(math.log2(nl)) + 1)
        size = 1 << (levels - 1)  # leaves, padded to a power of two
        self.levels = levels
        self.n = n
        start = np.arange(size) * LEAF
        end = np.minimum(start + LEAF, n)
        cnt = np.maximum(end - start, 0)
        lo = np.where(cnt > 0, s[np.minimum(start, n - 1)], 0.0)
        hi = np.where(cnt > 0, s[np.maximum(end - 1, 0)], 0.0)
        c = 0.5 * (lo + hi)
        r = 0.5 * (hi - lo)
        rs = np.where(r > 0, r, 1.0)
        # leaf moments: sum ((s - c)/r)^t over members
        pad = np.full(size * LEAF, np.nan)
        pad[:n] = s
        block = pad.reshape(size, LEAF)
        u = (block - c[:, None]) / rs[:, None]
        u = np.where(np.isnan(u), 0.0, u)
        member = (~np.isnan(block)).astype(float)
        M = np.empty((size, J))
        for s0 in range(0, size, 2048):  # in chunks: the powers of 2048 leaves fit in cache
            M[s0 : s0 + 2048] = np.einsum(
                "blt,bl->bt", _powers(u[s0 : s0 + 2048], J), member[s0 : s0 + 2048]
            )
        self.cen, self.rad, self.cnt, self.mom = [c], [r], [cnt], [M]
        self.lo, self.hi = [lo], [hi]
        for _ in range(1, levels):
            c0, r0, n0, M0 = self.cen[-1], self.rad[-1], self.cnt[-1], self.mom[-1]
            lo0, hi0 = self.lo[-1], self.hi[-1]
            a, b = slice(0, None, 2), slice(1, None, 2)
            na, nb = n0[a], n0[b]
            lo1 = np.where(na > 0, lo0[a], lo0[b])
            hi1 = np.where(nb > 0, hi0[b], hi0[a])
            c1 = 0.5 * (lo1 + hi1)
            r1 = 0.5 * (hi1 - lo1)
            r1s = np.where(r1 > 0, r1, 1.0)
            M1 = self._shift(M0[a], c0[a], r0[a], c1, r1s, na) + self._shift(
                M0[b], c0[b], r0[b], c1, r1s, nb
            )
            self.cen.append(c1)
            self.rad.append(r1)
            self.cnt.append(na + nb)
            self.mom.append(M1)
            self.lo.append(lo1)
            self.hi.append(hi1)

    @staticmethod
    def _shift(
        M: np.ndarray,
        c: np.ndarray,
        r: np.ndarray,
        c1: np.ndarray,
        r1s: np.ndarray,
        cnt: np.ndarray,
    ) -> np.ndarray:
        """Scaled moments about a child's centre moved to the parent's centre and scale.

        M1_t = sum_a C(t, a) d^(t-a) q^a M_a, computed as the truncated convolution
        M1_t / t! = sum_k (d^k / k!) (q^(t-k) M_(t-k) / (t-k)!), one (blocks, J) update per
        k, so no (blocks, J, J) array is formed.
        """
        d = (c - c1) / r1s  # |d| + r/r1 <= 1
        q = np.where(r > 0, r / r1s, 0.0)
        N = M * _powers(q, J) * _INV_FACT[None, :]
        dk = _powers(d, J) * _INV_FACT[None, :]
        out = N * dk[:, :1]
        for k in range(1, J):
            out[:, k:] += dk[:, k : k + 1] * N[:, : J - k]
        out *= _FACT[None, :]
        return np.where(cnt[:, None] > 0, out, 0.0)


def smear_power(
    eta: np.ndarray,
    e: np.ndarray,
    beta: float,
    gamma: float,
    delta: float,
    p: float,
    outside_zero: bool,
) -> np.ndarray:
    """mean_i of beta (gamma + delta (eta + e_i))^p over the defined terms (base > 0).

    Terms with base <= 0 count as 0 when ``outside_zero`` (a clip) and are left
    out of the mean otherwise; ``nan`` where no term is defined.  Relative error
    at most TREE_RTOL plus rounding.
    """
    eta = np.asarray(eta, dtype=float)
    sg = 1.0 if delta > 0 else -1.0
    ad = abs(delta)
    s = np.sort(sg * np.asarray(e, dtype=float))
    n = s.size
    A = gamma + delta * eta  # base = A + ad * s
    with np.errstate(divide="ignore", invalid="ignore"):
        sstar = -A / ad
    i0 = np.searchsorted(s, sstar, side="right")  # first defined term
    tree = _Tree(s)
    total = np.zeros(eta.size)
    m = eta.size
    rho_ok = _rho_ok(float(p))
    cp = _binom_row(float(p))

    def add_exact(eid: np.ndarray, idx: np.ndarray) -> None:
        """Exact terms for (eta id, element index) pairs (idx >= i0 guaranteed)."""
        if eid.size == 0:
            return
        base = A[eid] + ad * s[idx]
        v = beta * np.power(base, p)
        total[:] += np.bincount(eid, weights=v, minlength=m)

    # the partial first leaf: elements i0 .. end of its leaf
    first_leaf = i0 // LEAF
    full_from = np.where(i0 % LEAF == 0, first_leaf, first_leaf + 1)
    off = np.arange(LEAF)
    idx = (first_leaf * LEAF)[:, None] + off[None, :]
    use = (idx >= i0[:, None]) & (idx < n) & (i0[:, None] < n) & (i0 % LEAF != 0)[:, None]
    eid = np.broadcast_to(np.arange(m)[:, None], idx.shape)[use]
    add_exact(eid, idx[use])
    # aligned blocks covering leaves [full_from, size): canonical decomposition
    size = 1 << (tree.levels - 1)
    lidx = full_from.astype(np.int64)
    ridx = np.full(m, size, dtype=np.int64)
    items_e, items_l, items_b = [], [], []
    for lev in range(tree.levels):
        take = (lidx < ridx) & (lidx % 2 == 1)
        items_e.append(np.flatnonzero(take))
        items_l.append(np.full(int(take.sum()), lev))
        items_b.append(lidx[take])
        lidx = np.where(take, lidx + 1, lidx)
        take_r = (lidx < ridx) & (ridx % 2 == 1)
        ridx = np.where(take_r, ridx - 1, ridx)
        items_e.append(np.flatnonzero(take_r))
        items_l.append(np.full(int(take_r.sum()), lev))
        items_b.append(ridx[take_r])
        lidx //= 2
        ridx //= 2
    pe = np.concatenate(items_e)
    pl = np.concatenate(items_l)
    pb = np.concatenate(items_b)
    while pe.size:
        nxt_e, nxt_l, nxt_b = [], [], []
        for lev in np.unique(pl):
            sel = pl == lev
            e_, b_ = pe[sel], pb[sel]
            cnt = tree.cnt[lev][b_]
            keep = cnt > 0
            e_, b_, cnt = e_[keep], b_[keep], cnt[keep]
            if e_.size == 0:
                continue
            c = tree.cen[lev][b_]
            r = tree.rad[lev][b_]
            base = A[e_] + ad * c
            rho = ad * r / base
            good = (base > 0) & (rho <= rho_ok)
            if np.any(good):
                g = good
                series = np.einsum(
                    "bt,bt->b", _powers(rho[g], J) * cp[None, :], tree.mom[lev][b_[g]]
                )
                val = beta * np.power(base[g], p) * series
                total[:] += np.bincount(e_[g], weights=val, minlength=m)
            bad = ~good
            if lev == 0:
                if np.any(bad):
                    eb, bb = e_[bad], b_[bad]
                    idx = bb[:, None] * LEAF + off[None, :]
                    ok = idx < n
                    eid = np.broadcast_to(eb[:, None], idx.shape)[ok]
                    add_exact(eid, idx[ok])
            elif np.any(bad):
                eb, bb = e_[bad], b_[bad]
                nxt_e += [eb, eb]
                nxt_l += [np.full(eb.size, lev - 1)] * 2
                nxt_b += [2 * bb, 2 * bb + 1]
        if not nxt_e:
            break
        pe, pl, pb = np.concatenate(nxt_e), np.concatenate(nxt_l), np.concatenate(nxt_b)
    count = np.full(m, float(n)) if outside_zero else (n - i0).astype(float)
    with np.errstate(invalid="ignore", divide="ignore"):
        out = np.where(count > 0, total / np.maximum(count, 1.0), np.nan)
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
    M = _powers((e - c) / rs, J).sum(axis=0)
    ad = abs(delta)
    base = gamma + delta * (eta + c)  # base at the centre, for delta of either sign
    with np.errstate(divide="ignore", invalid="ignore"):
        rho = ad * r / base
    done = (base > 0) & (rho <= _rho_ok(float(p)))
    out = np.full(eta.size, np.nan)
    if np.any(done):
        sgn = np.sign(delta)
        cp = _binom_row(float(p)) * sgn ** np.arange(J)  # (1 + x u)^p with x = delta r / base
        series = _powers(rho[done], J) @ (cp * M)
        out[done] = beta * np.power(base[done], p) * series / e.size
    return out, done


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
    """The exact double sum for a power-form inverse (same semantics as smear_power)."""
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
