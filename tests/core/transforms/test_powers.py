"""sqrt, reciprocal, square and the general power: each rung equals x^q."""

from __future__ import annotations

import numpy as np
import pytest
from service.core.transforms import LADDER, Transform, ladder_transform, read_back

X = np.array([0.05, 0.3, 1.0, 2.5, 40.0])
NAMED = [("sqrt", 0.5), ("reciprocal", -1.0), ("square", 2.0)]


@pytest.mark.parametrize("name, q", NAMED)
def test_named_rungs_are_the_power_with_their_exponent(name, q):
    t, p = Transform(name), Transform("power", exponent=q)
    # source: definitions sqrt(x) = x^0.5, 1/x = x^-1, x^2 (Tukey 1977 ladder)
    np.testing.assert_allclose(t.forward(X), X**q, rtol=1e-15)
    np.testing.assert_allclose(t.forward(X), p.forward(X), rtol=1e-15)
    z = t.forward(X)
    np.testing.assert_allclose(t.inverse(z), X, rtol=1e-12)
    np.testing.assert_allclose(t.inverse_derivative(z), p.inverse_derivative(z), rtol=1e-12)
    assert t.log_jacobian(X) == pytest.approx(p.log_jacobian(X), rel=1e-12)
    assert t.domain_text() == p.domain_text()
    assert t.increasing == p.increasing == (q > 0)


@pytest.mark.parametrize("q", [-2.0, -0.5, 1 / 3, 0.5, 1.5, 3.0])
def test_power_log_jacobian_and_inverse_slope_against_numerical_derivatives(q):
    t = Transform("power", exponent=q)
    x = np.linspace(0.5, 4.0, 4001)
    # source: numpy.gradient (second-order central differences) of the forward map and of the
    # inverse; tolerance rel 1e-5 for a step of 1e-3 on smooth maps
    slope = np.gradient(t.forward(x), x)[1:-1]
    assert t.log_jacobian(x[1:-1]) == pytest.approx(float(np.sum(np.log(np.abs(slope)))), rel=1e-5)
    z = np.sort(t.forward(x))
    np.testing.assert_allclose(
        t.inverse_derivative(z)[1:-1], np.gradient(t.inverse(z), z)[1:-1], rtol=1e-4
    )


def test_inverses_clip_or_refuse_outside_the_image():
    # source: Duan (1983) smearing practice: an increasing power below 0 maps to 0; a
    # decreasing one has no original value there
    z = np.array([-1.0, 0.0, 4.0])
    assert Transform("sqrt").inverse(z).tolist() == [0.0, 0.0, 16.0]
    assert Transform("square").inverse(z).tolist() == [0.0, 0.0, 2.0]
    r = Transform("reciprocal").inverse(z)
    assert np.isnan(r[:2]).all() and r[2] == 0.25
    assert np.isnan(Transform("power", exponent=-0.5).inverse(z)[:2]).all()


def test_domains_follow_the_sign_of_the_exponent():
    x = np.array([-1.0, 0.0, 1.0])
    for t in (Transform("sqrt"), Transform("square"), Transform("power", exponent=0.5)):
        assert t.domain_mask(x).tolist() == [False, True, True] and t.domain_text() == "values >= 0"
    for t in (Transform("reciprocal"), Transform("power", exponent=-0.5), Transform("power")):
        assert t.domain_mask(x).tolist() == [False, False, True] and t.domain_text() == "values > 0"
    assert Transform("sqrt").domain_problem(np.array([3.0, -1.5]), "x", "predictor") == (
        "predictor 'x' has negative values (minimum -1.5); sqrt needs values >= 0; use yeo_johnson"
    )
    assert Transform("reciprocal").domain_problem(np.array([3.0, 0.0]), "x", "predictor") == (
        "predictor 'x' has values <= 0 (minimum 0); reciprocal needs values > 0; use a shifted "
        "log or yeo_johnson"
    )


def test_a_power_at_zero_is_the_log_and_at_one_the_identity():
    t = Transform("power", exponent=5e-4, estimated=True)
    assert (t.name, t.exponent, t.shift) == ("log", None, 0.0)
    assert Transform("power", exponent=1.0).is_identity
    assert Transform("power", exponent=0.25).n_estimated == 0
    assert Transform("power", exponent=0.25, estimated=True).n_estimated == 1


def test_ladder_rungs_get_their_names():
    names = [ladder_transform(q).name for q in LADDER]
    assert names == ["reciprocal", "power", "log", "sqrt", "identity", "square"]
    assert ladder_transform(-0.5) == Transform("power", exponent=-0.5)


def test_power_labels_and_object_form():
    t = Transform("power", exponent=0.25)
    assert t.label("x") == "power(x, exponent=0.25)"
    assert Transform("power").label("x") == "power(x, exponent=estimated)"
    assert read_back(t) == t
    # an exponent this close to 0 is the log (the family's normalise)
    assert Transform("power", exponent=1e-4, estimated=True) == Transform(
        "log", shift=0.0, estimated=True
    )
    assert Transform("reciprocal").label("x") == "1/x" and Transform("square").label("x") == "x^2"
