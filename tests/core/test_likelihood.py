"""Residual sums of squares of the profile likelihood against numpy least squares."""

from __future__ import annotations

import numpy as np
import pytest
from service.core.likelihood import _Projector


@pytest.mark.parametrize("noise", [1.0, 1e-3, 1e-9, 0.0])
def test_projector_rss_matches_least_squares(noise):
    rng = np.random.default_rng(4)
    n = 500
    X = np.column_stack([np.ones(n), rng.uniform(1, 1e4, n), rng.normal(0, 1e-3, n)])
    z = X @ np.array([3.0, 2e-3, 50.0]) + noise * rng.normal(size=n)
    coef, *_ = np.linalg.lstsq(X, z, rcond=None)
    r = z - X @ coef
    ref = float(r @ r)
    got = _Projector(X, n).rss(z)
    # source: numpy.linalg.lstsq (SVD least squares) as the reference
    assert got == pytest.approx(ref, rel=1e-8, abs=1e-20 * float(z @ z))


def test_projector_handles_a_rank_deficient_design():
    rng = np.random.default_rng(5)
    n = 200
    x = rng.normal(size=n)
    X = np.column_stack([np.ones(n), x, 2 * x])  # third column repeats the second
    z = 1 + x + rng.normal(size=n)
    p = _Projector(X, n)
    assert p.L is None and p.has_const
    coef, *_ = np.linalg.lstsq(X, z, rcond=None)
    r = z - X @ coef
    assert p.rss(z) == pytest.approx(float(r @ r), rel=1e-10)


def test_constant_detected_through_either_path():
    rng = np.random.default_rng(6)
    n = 100
    x = rng.normal(size=n)
    assert _Projector(np.column_stack([np.ones(n), x]), n).has_const
    assert not _Projector(x[:, None], n).has_const
