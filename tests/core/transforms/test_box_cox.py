"""Box-Cox against scipy (forward map and log-likelihood)."""

from __future__ import annotations

import math

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from service.core.transforms import Transform, box_cox_map

RNG = np.random.default_rng(7)
Y = np.exp(RNG.normal(1.0, 0.6, 60))


@pytest.mark.parametrize("lam", [-1.5, -0.5, 0.0, 0.3, 1.0, 2.2])
def test_forward_and_likelihood_equal_scipy(lam):
    t = Transform("box_cox", lam=lam)
    # source: scipy.stats.boxcox(x, lmbda) (reference library)
    np.testing.assert_allclose(t.forward(Y), stats.boxcox(Y, lmbda=lam), rtol=1e-12)
    np.testing.assert_allclose(box_cox_map(Y, lam), t.forward(Y), rtol=0)
    # source: scipy.stats.boxcox_llf = -n/2 log(var z) + (lam - 1) sum log y, the normal
    # log-likelihood of an intercept-only model without the constant -n/2 (1 + log 2 pi);
    # our y-scale likelihood is statsmodels' z-scale llf plus log_jacobian
    n = Y.size
    llf = sm.OLS(t.forward(Y), np.ones((n, 1))).fit().llf + t.log_jacobian(Y)
    assert llf + n / 2 * (1 + math.log(2 * math.pi)) == pytest.approx(
        stats.boxcox_llf(lam, Y), rel=1e-10
    )


@pytest.mark.parametrize("lam", [-0.7, 0.0, 0.5, 1.8])
def test_inverse_and_its_slope(lam):
    t = Transform("box_cox", lam=lam)
    z = t.forward(Y)
    np.testing.assert_allclose(t.inverse(z), Y, rtol=1e-10)
    # source: scipy.special.inv_boxcox (reference library)
    from scipy.special import inv_boxcox

    np.testing.assert_allclose(t.inverse(z), inv_boxcox(z, lam), rtol=1e-10)
    zz = np.linspace(float(z.min()), float(z.max()), 20001)
    # source: numpy.gradient of the inverse (central differences); tolerance rel 1e-5
    np.testing.assert_allclose(
        t.inverse_derivative(zz)[1:-1], np.gradient(t.inverse(zz), zz)[1:-1], rtol=1e-5
    )


def test_singular_point_and_clipping_of_the_inverse():
    # source: (1 + lam z)^(1/lam) has its edge at z = -1/lam
    assert Transform("box_cox", lam=0.5).inverse_singularities() == (-2.0,)
    assert Transform("box_cox", lam=0.0).inverse_singularities() == ()
    assert Transform("box_cox", lam=0.5).inverse(np.array([-3.0]))[0] == 0.0
    assert np.isnan(Transform("box_cox", lam=-0.5).inverse(np.array([3.0]))[0])


def test_an_open_lambda_is_estimated_and_labelled_so():
    t = Transform("box_cox")
    assert t.needs_lambda and not t.is_fitted
    assert t.label("y") == "box_cox(y, lambda=estimated)"
    assert t.domain_text() == "values > 0"
    with pytest.raises(ValueError, match="fit it first"):
        t.forward(Y)
