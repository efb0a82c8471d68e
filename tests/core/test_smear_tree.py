"""Smeared means of power back-transforms (service/core/_smear_tree.py): the tree code and the
root series within their stated bound of a 40-digit mpmath sum.

Tolerance (fixed in advance): TREE_RTOL plus 1e-12 of the mpmath sum of the smearing terms
(Duan 1983), the bound the module states.
"""

from __future__ import annotations

import math

import mpmath
import numpy as np
import pytest
from service.core import _smear_tree as st
from service.core import transforms as tr


def _mp_smear(eta, e, beta, gamma, delta, p, zero):
    mpmath.mp.dps = 40
    out = []
    for h in eta:
        tot, cnt = mpmath.mpf(0), 0
        for v in e:
            base = mpmath.mpf(gamma) + mpmath.mpf(delta) * (mpmath.mpf(h) + mpmath.mpf(v))
            if base > 0:
                tot += mpmath.mpf(beta) * base ** mpmath.mpf(p)
                cnt += 1
            elif zero:
                cnt += 1
        out.append(float(tot / cnt) if cnt else math.nan)
    return np.array(out)


@pytest.mark.parametrize(
    "t, centre",
    [
        pytest.param(tr.Transform("square"), 0.5, id="square-clip"),
        pytest.param(tr.Transform("reciprocal"), 2.5, id="reciprocal-pole"),
        pytest.param(tr.Transform("power", exponent=-0.5), 3.0, id="power-pole"),
        pytest.param(tr.Transform("box_cox", lam=0.4), -1.0, id="box_cox-clip"),
        pytest.param(tr.Transform("box_cox", lam=-0.7), 0.6, id="box_cox-pole"),
    ],
)
def test_tree_smearing_within_its_stated_bound(t, centre):
    rng = np.random.default_rng(17)
    e = rng.normal(0, 0.8, 700)
    e -= e.mean()
    eta = rng.uniform(centre - 1.5, centre + 1.5, 30)
    form = st.power_form(t)
    beta, gamma, delta, p, _zero = form
    # keep every defined term's base above 1e-3 (rounding of a base near 0 is not the tree's
    # error); the tree still has to split blocks and sum leaves near the singular point
    keep = []
    for h in eta:
        base = gamma + delta * (h + e)
        pos = base[base > 0]
        keep.append(pos.size == 0 or pos.min() > 1e-3)
    eta = eta[np.array(keep)]
    assert eta.size >= 10
    fast = st.smear_power(eta, e, *form)
    root, done = st.smear_power_root(eta, e, beta, gamma, delta, p)
    ref = _mp_smear(eta, e, *form)
    ok = np.isfinite(ref)
    assert np.array_equal(ok, np.isfinite(fast))
    bound = st.TREE_RTOL + 1e-12
    # source: 40-digit mpmath sum of the smearing terms; the stated bound TREE_RTOL + rounding
    assert np.all(np.abs(fast[ok] - ref[ok]) <= bound * np.abs(ref[ok]))
    if done.any():
        assert np.all(np.abs(root[done] - ref[done]) <= bound * np.abs(ref[done]))


def test_root_series_rho_limit_meets_the_bound():
    # source: direct summation of the binomial series tail sum_{t>=J} |C(p,t)| rho^t to
    # t = J + 3000 (rho < 1, terms decay geometrically), divided by min (1 +- rho)^p
    for p in (0.5, -1.0, -2.0, 2.5, 1 / 0.3, -1 / 0.7, 12.0, 45.5):
        rho = st._rho_ok(p)
        assert 0.0 < rho < 1.0
        c = 1.0
        tail = 0.0
        for t in range(st.J + 3000):
            if t >= st.J:
                tail += abs(c) * rho**t
            c = c * (p - t) / (t + 1)
        m = (1 - rho) ** p if p > 0 else (1 + rho) ** p
        assert tail / m <= st.TREE_RTOL * (1 + 1e-9)
