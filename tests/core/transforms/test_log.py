"""The log family: log(x + shift), the domain with and without a shift, the chosen shift."""

from __future__ import annotations

import math

import numpy as np
import pytest
from service.core.transforms import Transform, chosen_shift, needs_shift, read_back, written_alike

ZEROS = np.array([0.0, 0.4, 2.0, 0.0, 5.0])


def test_round_trip_and_slopes_with_a_shift():
    t = Transform("log", shift=2.5)
    x = np.array([-2.0, -1.0, 0.0, 0.7, 30.0])
    z = t.forward(x)
    # source: definition, log(x + c) and exp(z) - c
    np.testing.assert_allclose(z, np.log(x + 2.5), rtol=0)
    np.testing.assert_allclose(t.inverse(z), x, rtol=1e-12, atol=1e-12)
    # source: d/dz (exp(z) - c) = exp(z); numerical check by numpy.gradient on a fine grid
    zz = np.linspace(-1.0, 2.0, 20001)
    np.testing.assert_allclose(
        t.inverse_derivative(zz)[1:-1], np.gradient(t.inverse(zz), zz)[1:-1], rtol=1e-6
    )
    assert t.log_jacobian(x) == pytest.approx(-float(np.sum(np.log(x + 2.5))), rel=1e-12)


def test_without_a_shift_the_search_adds_one_for_zeros_but_a_log_as_sent_does_not():
    t = Transform("log")
    x = np.array([-1.0, 0.0, 1.0])
    assert t.domain_mask(x).tolist() == [False, True, True]
    assert t.domain_text() == "values >= 0"
    assert t.domain_mask(x, as_sent=True).tolist() == [False, False, True]
    assert t.domain_text(as_sent=True) == "values > 0"


def test_a_shift_moves_the_domain_and_its_wording():
    t = Transform("log", shift=2.5)
    x = np.array([-3.0, -2.5, -2.4])
    assert t.domain_mask(x).tolist() == [False, False, True]
    assert t.domain_text() == "values > -2.5"
    assert Transform("log", shift=0.0).domain_text() == "values > 0"


@pytest.mark.parametrize(
    "t, x, text",
    [
        (
            Transform("log"),
            np.array([3.0, -1.5]),
            "response 'cost' has negative values (minimum -1.5); log needs values >= 0 (zeros "
            "get a shift); use yeo_johnson or give log an explicit 'shift'",
        ),
        (
            Transform("log", shift=1.0),
            np.array([3.0, -2.0]),
            "response 'cost' plus shift 1 is not positive everywhere (minimum -2); log needs "
            "values > 0; use a larger shift or yeo_johnson",
        ),
    ],
)
def test_domain_messages_are_the_ones_callers_see(t, x, text):
    assert t.domain_problem(x, "cost", "response") == text


def test_chosen_shift_is_half_the_smallest_positive_value():
    # source: common practice for log(y + c) with zeros: c = half the smallest y > 0
    assert chosen_shift(ZEROS) == pytest.approx(0.2)
    assert chosen_shift(np.array([0.0, 0.0])) == 1.0
    assert needs_shift(ZEROS) and not needs_shift(np.array([0.1, 3.0]))


def test_shift_in_labels_cost_and_object_form():
    assert Transform("log").label("x") == "log(x)"
    assert Transform("log", shift=3.0).label("x") == "log(x, shift=3)"
    assert Transform("log", shift=0.0).simplicity == 1
    assert Transform("log", shift=0.5).simplicity == 4
    t = Transform("log", shift=0.2, estimated=True)
    # a chosen shift keeps its estimated mark when read back; a zero shift is written as a
    # plain log (shift unset)
    assert read_back(t) == t
    assert written_alike(Transform("log", shift=0.0)) == Transform("log")
    assert written_alike(Transform("log", shift=-0.0)) == Transform("log")
    assert not Transform("log").is_fitted and Transform("log", shift=0.0).is_fitted
    assert Transform("log", shift=0.0).log_jacobian(np.array([math.e])) == pytest.approx(-1.0)
