"""The identity family."""

from __future__ import annotations

import numpy as np
from service.core.transforms import Transform, read_back

X = np.array([-1e6, -2.5, 0.0, 3.0, 7e8])


def test_identity_changes_nothing_and_returns_a_copy():
    t = Transform("identity")
    z = t.forward(X)
    # source: definition of the identity map
    np.testing.assert_array_equal(z, X)
    assert z is not X
    np.testing.assert_array_equal(t.inverse(z), X)
    np.testing.assert_array_equal(t.inverse_derivative(z), np.ones_like(X))
    np.testing.assert_array_equal(t.derivative(X), np.ones_like(X))
    assert t.log_jacobian(X) == 0.0
    assert t.inverse_singularities() == ()


def test_identity_facts():
    t = Transform("identity")
    assert t.is_identity and t.increasing and t.is_fitted and not t.needs_lambda
    assert t.label("cost") == "cost" and read_back(t) == t
    assert t.domain_mask(X).all() and t.domain_problem(X, "cost", "response") is None
    assert t.simplicity == 0
