"""Back-transforms (service/core/retransform.py): the naive inverse and Duan's smearing mean.

References: Duan (1983) "Smearing estimate", JASA 78:605-610: E[y | x0] ~ (1/n) sum_i
g^-1(x0'b + e_i), written out in this file as the exact O(m n) double sum with inverses taken
from their definitions (scipy.special.inv_boxcox for Box-Cox; Yeo & Johnson 2000 for their
family) and the clipping rules the module documents; the closed form of the log family
exp(eta) * mean(exp(e)).  Tolerance (fixed in advance): rel 1e-8, the same undefined entries.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.special import logsumexp
from service.core import retransform
from service.core import transforms as tr

from tests.core.written_out import inverse_written_out as _inverse_written_out


def _duan(t: tr.Transform, eta: np.ndarray, e: np.ndarray) -> np.ndarray:
    """Duan's smearing mean written out; undefined terms are left out of each mean (the
    documented design choice), nan only if every term is undefined."""
    terms = _inverse_written_out(t, eta[:, None] + e[None, :])
    defined = np.isfinite(terms)
    count = defined.sum(axis=1)
    total = np.where(defined, terms, 0.0).sum(axis=1)
    with np.errstate(invalid="ignore"):
        return np.where(count > 0, total / np.maximum(count, 1), np.nan)


CASES = [
    tr.Transform("identity"),
    tr.Transform("log", shift=0.0),
    tr.Transform("log", shift=1.5),
    tr.Transform("sqrt"),
    tr.Transform("square"),
    tr.Transform("reciprocal"),
    tr.Transform("power", exponent=-0.5),
    tr.Transform("power", exponent=1 / 3),
    tr.Transform("box_cox", lam=0.0),
    tr.Transform("box_cox", lam=0.4),
    tr.Transform("box_cox", lam=-0.7),
    tr.Transform("yeo_johnson", lam=0.6),
    tr.Transform("yeo_johnson", lam=-0.8),
]


@pytest.mark.parametrize("t", CASES, ids=lambda t: t.label("y"))
@pytest.mark.parametrize("m", [40, 3000], ids=["exact-sum", "fast-path"])
def test_smeared_mean_equals_duan_written_out(t, m):
    rng = np.random.default_rng(m)
    e = rng.normal(0, 0.6, 450)
    e -= e.mean()
    centre = 1.5 if t.name not in ("yeo_johnson",) else 0.5
    eta = rng.uniform(centre - 1.5, centre + 1.5, m)
    got = retransform.smeared_mean(t, eta, e)
    # source: Duan (1983) double sum over the residuals, inverses from their definitions
    np.testing.assert_allclose(got, _duan(t, eta, e), rtol=1e-8, atol=0, equal_nan=True)


def test_log_smearing_is_the_closed_form_and_exceeds_the_median():
    rng = np.random.default_rng(1)
    e = rng.normal(0, 0.5, 200)
    eta = np.linspace(0, 2, 7)
    mean = retransform.smeared_mean(tr.Transform("log", shift=0.0), eta, e)
    # source: Duan (1983) for the log: exp(eta) * mean(exp(e))
    np.testing.assert_allclose(mean, np.exp(eta) * np.mean(np.exp(e)), rtol=1e-12)
    # the naive inverse is the median exp(eta): below the mean (Jensen) for centred residuals
    median = retransform.naive(tr.Transform("log", shift=0.0), eta)
    np.testing.assert_allclose(median, np.exp(eta), rtol=1e-15)
    e0 = e - e.mean()
    assert np.all(retransform.smeared_mean(tr.Transform("log", shift=0.0), eta, e0) > median)


def test_undefined_terms_are_left_out_and_all_undefined_is_nan():
    t = tr.Transform("reciprocal")
    e = np.array([-1.0, 0.5, 1.0])
    eta = np.array([0.2, -5.0])
    got = retransform.smeared_mean(t, eta, e)
    # source: the definition written out: 1/(0.2 + 0.5) and 1/(0.2 + 1.0) averaged; the
    # first term (z = -0.8, unbounded y) is left out; at eta = -5 no term is defined
    assert got[0] == pytest.approx((1 / 0.7 + 1 / 1.2) / 2, rel=1e-14)
    assert np.isnan(got[1])


# ------------------------------------------- smearing: fast paths vs exact
def _smear_case(seed: int):
    """A seeded configuration with at least BINNED_MIN_ETAS etas (so a fast path runs)."""
    rng = np.random.default_rng(seed)
    k = seed % 6
    if k == 0:
        t = tr.Transform("reciprocal")
    elif k == 1:
        t = tr.Transform("square")
    elif k == 2:
        t = tr.Transform("power", exponent=float(rng.choice([-0.5, -2.0, 1.0 / 3.0, 0.25, 3.0])))
    elif k in (3, 4):
        t = tr.Transform("box_cox", lam=float(rng.uniform(-2.5, 2.5)))
    else:
        t = tr.Transform("yeo_johnson", lam=float(rng.uniform(-2.5, 2.5)))
    n = int(rng.integers(150, 600))
    m = retransform.BINNED_MIN_ETAS + int(rng.integers(1, 4000))
    kind = int(rng.integers(0, 3))
    if kind == 0:
        e = rng.normal(0, rng.uniform(0.05, 2.0), n)
    elif kind == 1:
        e = rng.standard_t(3, n) * rng.uniform(0.05, 1.0)
    else:
        e = rng.exponential(rng.uniform(0.05, 1.0), n)
    e = e - e.mean()
    centre, width = rng.uniform(-3, 6), rng.uniform(0.01, 4)
    eta = rng.uniform(centre - width, centre + width, m)
    return t, eta, e


def _assert_fast_equals_exact(t, eta, e):
    assert eta.size >= retransform.BINNED_MIN_ETAS  # a fast path is taken
    fast = retransform.smeared_mean(t, eta, e)
    exact = retransform._exact(t, eta, e)
    # source: the exact double sum mean_i g^-1(eta_j + e_i); rel 1e-8, same undefined entries
    np.testing.assert_allclose(fast, exact, rtol=1e-8, atol=0, equal_nan=True)


@pytest.mark.parametrize("seed", range(36))
def test_smeared_mean_fast_paths_equal_exact_sum(seed):
    t, eta, e = _smear_case(seed)
    _assert_fast_equals_exact(t, eta, e)


@pytest.mark.parametrize(
    "t, centre",
    [
        # the clip of a Box-Cox inverse with lambda > 0 inside the range (kink in S)
        pytest.param(tr.Transform("box_cox", lam=0.66), -1.5, id="box_cox-clip"),
        pytest.param(tr.Transform("box_cox", lam=2.06), -0.5, id="box_cox-clip-steep"),
        # the pole of 1/z and of a negative-lambda Box-Cox inverse inside the range
        pytest.param(tr.Transform("reciprocal"), 0.3, id="reciprocal-pole"),
        pytest.param(tr.Transform("box_cox", lam=-0.5), 2.0, id="box_cox-pole"),
        # the clip of sqrt(max(z, 0)) and the Yeo-Johnson branch change at z = 0
        pytest.param(tr.Transform("square"), 0.7, id="square-clip"),
        pytest.param(tr.Transform("yeo_johnson", lam=0.9), 0.2, id="yeo_johnson-branch"),
        pytest.param(tr.Transform("yeo_johnson", lam=-0.8), 0.5, id="yeo_johnson-pole"),
        # singular point far from every eta + e_i: one series block applies
        pytest.param(tr.Transform("box_cox", lam=0.3), 8.0, id="box_cox-far"),
        pytest.param(tr.Transform("power", exponent=-0.5), 6.0, id="power-far"),
    ],
)
@pytest.mark.parametrize("m", [1500, 3500])
def test_smeared_mean_near_kinks_and_poles(t, centre, m):
    rng = np.random.default_rng(m)
    e = rng.normal(0, 0.8, 300)
    e -= e.mean()
    eta = rng.uniform(centre - 1.5, centre + 1.5, m)
    _assert_fast_equals_exact(t, eta, e)


@pytest.mark.parametrize(
    "t",
    [
        tr.Transform("identity"),
        tr.Transform("log", shift=0.0),
        tr.Transform("log", shift=2.5),
        tr.Transform("sqrt"),
        tr.Transform("box_cox", lam=0.0),
    ],
)
def test_closed_form_smearing_equals_exact_sum(t):
    rng = np.random.default_rng(3)
    e = rng.normal(0, 0.7, 400)
    e -= e.mean()
    eta = rng.uniform(-1.0, 3.0, 1500)
    _assert_fast_equals_exact(t, eta, e)


def test_square_root_smearing_column_by_column_equals_one_candidate_at_a_time():
    rng = np.random.default_rng(9)
    n, m, C = 240, 70, 6
    e = rng.normal(0, 0.5, (n, C)) * rng.uniform(0.2, 2.0, C)
    e -= e.mean(axis=0)
    eta = rng.uniform(-1.0, 2.0, (m, C))  # some terms cut off at zero, some columns not at all
    eta[:, 0] += 10.0
    got = retransform.smear_sqrt(eta, e)
    for j in range(C):
        one = retransform.smear_sqrt(eta[:, j], e[:, j])
        np.testing.assert_allclose(got[:, j], one, rtol=1e-12)
        # source: Duan (1983) double sum with g^-1(z) = max(z, 0)^2, written out
        want = np.mean(np.maximum(eta[:, j, None] + e[None, :, j], 0.0) ** 2, axis=1)
        np.testing.assert_allclose(got[:, j], want, rtol=1e-10)


def test_counts_of_terms_cut_off_equal_searchsorted_with_ties_and_ends():
    rng = np.random.default_rng(21)
    for n in (1, 2, 7, 64, 1000):
        rows = np.sort(np.round(rng.normal(0, 1, (5, n)), 1), axis=1)  # many ties
        row = rng.integers(0, 5, 400)
        q = np.concatenate(
            [rows[row[:200], rng.integers(0, n, 200)], rng.normal(0, 2, 200)]
        )  # values equal to a residual, and between, below and above them all
        got = retransform._count_at_most(rows, row, q)
        # source: numpy.searchsorted(side="right") row by row
        want = [np.searchsorted(rows[r], v, side="right") for r, v in zip(row, q, strict=True)]
        np.testing.assert_array_equal(got, want)


def test_square_root_smearing_with_most_terms_cut_off_equals_the_double_sum():
    rng = np.random.default_rng(22)
    n, m, C = 300, 90, 5
    e = rng.standard_t(4, (n, C))
    e -= e.mean(axis=0)
    eta = rng.uniform(-6.0, 1.0, (m, C))  # from nearly every term cut off to a few
    eta[0] = -e.max(axis=0)  # every term cut off but one exactly at zero
    got = retransform.smear_sqrt(eta, e)
    # source: Duan (1983) double sum with g^-1(z) = max(z, 0)^2, written out
    want = np.mean(np.maximum(eta[:, None, :] + e[None, :, :], 0.0) ** 2, axis=1)
    np.testing.assert_allclose(got, want, rtol=1e-9, atol=1e-15)


def test_log_smear_factor_of_huge_residuals_is_finite_and_equals_the_log_sum_exp():
    rng = np.random.default_rng(23)
    e = rng.normal(0, 1.0, (400, 3))
    e[5, 1] = 705.0  # exp(705) overflows a float: that column needs the shift
    got = retransform.log_smear_factor(e)
    # source: scipy.special.logsumexp, log mean exp(e) = logsumexp(e) - log(n)
    want = np.exp(logsumexp(e[:, [0, 2]], axis=0) - np.log(400))
    np.testing.assert_allclose(got[[0, 2]], want, rtol=1e-13)
    assert np.log(got[1]) == pytest.approx(logsumexp(e[:, 1]) - np.log(400), rel=1e-14)
    small = retransform.log_smear_factor(e[:, [0, 2]])  # no shift needed: the plain mean
    np.testing.assert_allclose(small, want, rtol=1e-13)
