"""Numerics stay bounded for every parameter a request or artifact may carry."""

from __future__ import annotations

import tracemalloc

import numpy as np
import pytest
from scipy import stats
from scipy.special import gammaln, logsumexp
from service.core import _smear_tree as st
from service.core import transforms as tr

X = np.linspace(0.5, 40.0, 50)


@pytest.mark.parametrize("lam", [5e-4, -9e-4, 1e-6])
def test_box_cox_lambda_below_the_floor_is_the_log(lam):
    t = tr.Transform("box_cox", lam=lam)
    assert t.lam == 0.0
    # source: Box & Cox (1964): (x^lambda - 1)/lambda -> log x as lambda -> 0; scipy.stats.boxcox
    # at lmbda=0 is the log
    np.testing.assert_allclose(t.forward(X), stats.boxcox(X, lmbda=0.0), rtol=1e-12)
    # the scale given up differs from the log by less than |lambda| (log x)^2 / 2 (+ higher terms)
    exact = stats.boxcox(X, lmbda=lam)
    assert np.all(np.abs(exact - np.log(X)) <= abs(lam) * np.log(X) ** 2 * 0.51 + 1e-15)


def test_box_cox_lambda_at_the_floor_is_kept():
    assert tr.Transform("box_cox", lam=tr.PARAM_FLOOR).lam == tr.PARAM_FLOOR


def test_yeo_johnson_near_the_branch_values_snaps():
    assert tr.Transform("yeo_johnson", lam=2e-4).lam == 0.0
    assert tr.Transform("yeo_johnson", lam=2.0 - 3e-4).lam == 2.0
    y = np.linspace(-3, 3, 13)
    # source: scipy.stats.yeojohnson at lmbda 2 (Yeo & Johnson 2000, negative branch -log1p(-y))
    np.testing.assert_allclose(
        tr.Transform("yeo_johnson", lam=2.0 - 3e-4).forward(y),
        stats.yeojohnson(y, lmbda=2.0),
        rtol=1e-12,
    )


def test_estimated_power_near_zero_becomes_the_log():
    t = tr.Transform("power", exponent=1e-5)
    assert t.name == "log" and t.shift == 0.0 and t.exponent is None
    np.testing.assert_allclose(t.forward(X), np.log(X))


@pytest.mark.parametrize("p", [1 / 0.0011, -1 / 0.0011])
def test_remainder_bound_holds_near_the_floor(p):
    # source: direct summation of the binomial series tail sum_{t>=J} |C(p,t)| rho^t, divided
    # by min (1 +- rho)^p, as in test_fast_cv for moderate p
    rho = st._rho_ok(p)
    assert 0.0 <= rho < 1.0
    if rho == 0.0:
        return
    # in logs: |C(p, t)| = |Gamma(p + 1)| / (t! |Gamma(p - t + 1)|) overflows a double here
    t = np.arange(st.J, st.J + 20000, dtype=float)
    log_c = gammaln(p + 1) - gammaln(t + 1) - gammaln(p - t + 1)
    log_tail = logsumexp(log_c + t * np.log(rho))
    log_m = p * np.log(1 - rho) if p > 0 else p * np.log(1 + rho)
    assert log_tail - log_m <= np.log(st.TREE_RTOL) + 1e-9


def test_remainder_bound_memory_is_bounded_for_any_exponent():
    tracemalloc.start()
    try:
        st._rho_ok(1e6)  # lambda 1e-6 before the floor: the bound is in closed form
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert peak < 100 * 2**20


def test_remainder_bounds_of_many_exponents_equal_one_at_a_time():
    ps = np.array([0.5, -2.0, 45.5, 1 / 0.0011, -1 / 0.0011, 3.0, 40.0, 1e6])
    for terms, rtol in ((st.J, st.TREE_RTOL), (st.BIN_J, st.BIN_RTOL)):
        many = st.rho_ok_many(ps, terms, rtol)
        assert many.tolist() == [st._rho_ok(float(p), terms, rtol) for p in ps]
