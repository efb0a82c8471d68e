"""Yeo-Johnson against scipy (forward map and log-likelihood), both branches."""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from service.core.transforms import Transform, yeo_johnson_map

RNG = np.random.default_rng(8)
X = RNG.normal(0.5, 2.0, 60)


@pytest.mark.parametrize("lam", [-1.2, 0.0, 0.4, 1.0, 2.0, 2.7])
def test_forward_and_likelihood_equal_scipy(lam):
    t = Transform("yeo_johnson", lam=lam)
    # source: scipy.stats.yeojohnson(x, lmbda), Yeo & Johnson (2000) definition
    np.testing.assert_allclose(t.forward(X), stats.yeojohnson(X, lmbda=lam), rtol=1e-12)
    np.testing.assert_allclose(yeo_johnson_map(X, lam), t.forward(X), rtol=0)
    # source: scipy.stats.yeojohnson_llf = -n/2 log(var z) + (lam - 1) sum sign(x) log1p|x|;
    # statsmodels' intercept-only llf plus log_jacobian differs by -n/2 (1 + log 2 pi)
    n = X.size
    llf = sm.OLS(t.forward(X), np.ones((n, 1))).fit().llf + t.log_jacobian(X)
    assert llf + n / 2 * (1 + math.log(2 * math.pi)) == pytest.approx(
        stats.yeojohnson_llf(lam, X), rel=1e-10
    )


@pytest.mark.parametrize("lam", [-0.6, 0.0, 0.7, 2.0, 2.4])
def test_inverse_slope_on_each_branch(lam):
    t = Transform("yeo_johnson", lam=lam)
    z = t.forward(X)
    np.testing.assert_allclose(t.inverse(z), X, rtol=1e-9, atol=1e-12)
    # source: numpy.gradient of the inverse, each branch on its own grid (the stencil must
    # not cross z = 0); tolerance rel 1e-5
    for zz in (np.linspace(0.01, float(z.max()), 20001), np.linspace(float(z.min()), -0.01, 20001)):
        np.testing.assert_allclose(
            t.inverse_derivative(zz)[1:-1], np.gradient(t.inverse(zz), zz)[1:-1], rtol=1e-5
        )


def test_defined_everywhere_and_lambda_near_two_is_two():
    t = Transform("yeo_johnson", lam=0.3)
    assert t.domain_mask(np.array([-1e6, 0.0, 1e6])).all()
    assert t.domain_problem(np.array([-5.0]), "y", "response") is None
    assert Transform("yeo_johnson", lam=2.0004).lam == 2.0
    assert Transform("yeo_johnson", lam=1.9).lam == 1.9
    # source: branch points of the inverse: z = 0, and the edges -1/lam, -1/(lam - 2)
    assert Transform("yeo_johnson", lam=1.0).inverse_singularities() == ()
    assert Transform("yeo_johnson", lam=-0.5).inverse_singularities() == (0.0, 2.0)
    assert Transform("yeo_johnson", lam=2.5).inverse_singularities() == (0.0, -2.0)
