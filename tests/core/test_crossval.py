"""K-fold cross-validation on the original scale, reproduced by an independent loop.

The independent loop uses scikit-learn's KFold for the partitions, statsmodels OLS for each
training fold, scipy for the forward transforms and writes Duan's (1983) smearing estimate
out: yhat = mean_i g^-1(x'b + e_i) over the training residuals e_i.  Tolerances (fixed in
advance): CV RMSE with the same fold assignment and a fixed transform rel 1e-8.  (Fold plans
are checked in test_folds.py, the smearing paths in test_retransform.py.)
"""

from __future__ import annotations

import math
import zlib

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from service.core import transforms as tr
from service.core.crossval import cross_validate
from service.core.data import prepare
from service.core.folds import make_plan
from service.core.spec import build_design
from service.selection.search import select
from service.selection.search_setup import SearchOptions
from sklearn.model_selection import KFold

from tests.typed import predictors, responses


# ------------------------------------------------ transforms written out
def _yj_inverse(z: np.ndarray, lam: float) -> np.ndarray:
    """Yeo-Johnson (2000) inverse for 0 < lam < 2, where it is always defined."""
    out = np.empty_like(z)
    p = z >= 0
    out[p] = (lam * z[p] + 1.0) ** (1.0 / lam) - 1.0
    out[~p] = 1.0 - (1.0 - (2.0 - lam) * z[~p]) ** (1.0 / (2.0 - lam))
    return out


def _bc_inverse(z: np.ndarray, lam: float) -> np.ndarray:
    base = lam * z + 1.0
    if lam > 0:
        return np.maximum(base, 0.0) ** (1.0 / lam)
    assert np.all(base > 0), "test data must keep the Box-Cox inverse defined"
    return base ** (1.0 / lam)


def _positive(z: np.ndarray) -> np.ndarray:
    assert np.all(z > 0), "test data must keep 1/z and z^(-2) defined"
    return z


# name -> (our transform, forward written independently, inverse written independently)
FAMILIES = {
    "identity": (tr.Transform("identity"), lambda y: y, lambda z: z),
    "log": (tr.Transform("log", shift=0.0), np.log, np.exp),
    "sqrt": (tr.Transform("sqrt"), np.sqrt, lambda z: np.maximum(z, 0.0) ** 2),
    "reciprocal": (tr.Transform("reciprocal"), lambda y: 1.0 / y, lambda z: 1.0 / _positive(z)),
    "square": (tr.Transform("square"), lambda y: y**2, lambda z: np.sqrt(np.maximum(z, 0.0))),
    "power-0.5": (
        tr.Transform("power", exponent=-0.5),
        lambda y: y**-0.5,
        lambda z: _positive(z) ** -2.0,
    ),
    "box_cox0.4": (
        tr.Transform("box_cox", lam=0.4),
        lambda y: stats.boxcox(y, lmbda=0.4),
        lambda z: _bc_inverse(z, 0.4),
    ),
    "box_cox-0.7": (
        tr.Transform("box_cox", lam=-0.7),
        lambda y: stats.boxcox(y, lmbda=-0.7),
        lambda z: _bc_inverse(z, -0.7),
    ),
    "yeo_johnson0.6": (
        tr.Transform("yeo_johnson", lam=0.6),
        lambda y: stats.yeojohnson(y, lmbda=0.6),
        lambda z: _yj_inverse(z, 0.6),
    ),
    "yeo_johnson1.5": (
        tr.Transform("yeo_johnson", lam=1.5),
        lambda y: stats.yeojohnson(y, lmbda=1.5),
        lambda z: _yj_inverse(z, 1.5),
    ),
}


def reference_cv(X, y, forward, inverse, folds, repeats, seed):
    """Mean over repeats of the pooled smeared RMSE, plus every per-fold RMSE."""
    rs = np.random.RandomState(seed)  # successive permutations across repeats
    pooled, per_fold = [], []
    n = y.size
    for _ in range(repeats):
        sq = np.empty(n)
        # source: scikit-learn KFold(shuffle=True); a shared RandomState gives repeat r its
        # r-th permutation (KFold shuffles with it, as permutation(n) does)
        for train, test in KFold(folds, shuffle=True, random_state=rs).split(X):
            ztr = forward(y[train])
            # source: statsmodels OLS on the training fold.  Columns are scaled to unit length
            # first (fitted values do not change; without it the SVD of a design whose columns
            # span 1e-6 .. 1e6 loses about 9 digits, the reference would be the weaker side)
            scale = np.sqrt(np.sum(X[train] ** 2, axis=0))
            res = sm.OLS(ztr, X[train] / scale).fit()
            e = ztr - (X[train] / scale) @ res.params
            eta = (X[test] / scale) @ res.params
            # source: Duan (1983) smearing estimate, written out
            yhat = inverse(eta[:, None] + e[None, :]).mean(axis=1)
            sq[test] = (y[test] - yhat) ** 2
            per_fold.append(math.sqrt(float(np.mean(sq[test]))))
        pooled.append(math.sqrt(float(np.mean(sq))))
    return float(np.mean(pooled)), np.array(per_fold)


# ------------------------------------------------------------ designs
def _random_design(rng, n):
    x1 = rng.uniform(0, 1, n)
    x2 = rng.normal(0, 1, n)
    return np.column_stack([np.ones(n), x1, x2])


def _collinear_design(rng, n):
    # two columns equal up to 1e-5: cond(X) ~ 1e5, the scaled Gram matrix ~ 1e10 (QR path)
    x1 = rng.normal(0, 1, n)
    x2 = x1 + 1e-5 * rng.normal(0, 1, n)
    return np.column_stack([np.ones(n), x1, x2, rng.uniform(0, 1, n)])


def _badly_scaled_design(rng, n):
    # Longley-like: a calendar year beside the intercept, columns on scales 1e-6 .. 1e6
    year = 1950.0 + rng.integers(0, 15, n) + rng.uniform(0, 1, n)
    return np.column_stack(
        [np.ones(n), 1e6 * rng.uniform(1, 2, n), 1e-6 * rng.uniform(1, 2, n), year]
    )


DESIGNS = {
    "random": _random_design,
    "collinear": _collinear_design,
    "badly_scaled": _badly_scaled_design,
}


def _response(rng, X):
    """A positive response whose linear predictor is moderate on the family's scale."""
    n = X.shape[0]
    Xc = (X[:, 1:] - X[:, 1:].mean(axis=0)) / X[:, 1:].std(axis=0)
    signal = Xc @ np.linspace(0.5, -0.3, Xc.shape[1]) / Xc.shape[1]
    return np.exp(1.5 + 0.3 * signal + rng.normal(0, 0.1, n))  # y in about [2.5, 7]


@pytest.mark.parametrize("design", list(DESIGNS))
@pytest.mark.parametrize("family", list(FAMILIES))
def test_cv_equals_independent_loop(design, family):
    rng = np.random.default_rng(zlib.crc32(f"{design}/{family}".encode()))
    n = 47  # not a multiple of 5: unequal folds
    X = DESIGNS[design](rng, n)
    y = _response(rng, X)
    ours_t, fwd, inv = FAMILIES[family]
    seed = int(rng.integers(0, 2**31))
    plan = make_plan(n, 5, 1, seed)
    res = cross_validate(X, y, ours_t, plan, False)
    ref, per_fold = reference_cv(X, y, fwd, inv, 5, 1, seed)
    # source: independent loop (sklearn KFold + statsmodels OLS + smearing); rel 1e-8
    assert res.value == pytest.approx(ref, rel=1e-8)
    np.testing.assert_allclose(res.fold_values, per_fold, rtol=1e-8)


@pytest.mark.parametrize("family", ["identity", "log", "box_cox0.4", "yeo_johnson1.5"])
def test_repeated_cv_uses_successive_permutations(family):
    rng = np.random.default_rng(5)
    n, folds, repeats, seed = 38, 4, 3, 1234
    X = _random_design(rng, n)
    y = _response(rng, X)
    ours_t, fwd, inv = FAMILIES[family]
    plan = make_plan(n, folds, repeats, seed)
    res = cross_validate(X, y, ours_t, plan, False)
    ref, per_fold = reference_cv(X, y, fwd, inv, folds, repeats, seed)
    # source: independent loop; repeat r = r-th permutation of RandomState(seed); rel 1e-8
    assert res.value == pytest.approx(ref, rel=1e-8)
    np.testing.assert_allclose(res.fold_values, per_fold, rtol=1e-8)
    # source: naive K-fold SE = sd(fold errors)/sqrt(K) over the R*K folds (common practice;
    # Bengio & Grandvalet 2004 show no unbiased estimator exists)
    assert res.std_error == pytest.approx(np.std(per_fold, ddof=1) / math.sqrt(folds), rel=1e-8)


def test_every_candidate_is_scored_on_the_same_folds():
    rng = np.random.default_rng(21)
    n = 41
    x = rng.uniform(1, 6, n)
    w = rng.uniform(0.5, 2, n)
    y = np.exp(0.4 + 0.3 * x - 0.2 * w + rng.normal(0, 0.2, n))
    prep = prepare(
        {"columns": {"y": y.tolist(), "x": x.tolist(), "w": w.tolist()}}, "y", ["x", "w"]
    )
    opts = SearchOptions(
        response_transforms=responses(["identity", "log", "sqrt", "box_cox"]),
        predictor_transforms=predictors(["identity", "log"]),
        folds=4,
        repeats=2,
        seed=17,
    )
    out = select(prep, opts, "test")
    assert len(out.scored) >= 8
    for s in out.scored:
        d = build_design(s.spec, prep)
        fresh = cross_validate(
            d.X,
            prep.y,
            s.spec.response_transform,
            make_plan(n, 4, 2, 17),
            tr.needs_shift(prep.y),
            d.names,
        )
        # source: re-scoring each candidate on an independently built plan for the requested
        # folds/repeats/seed reproduces its CV exactly only if the search used those folds
        np.testing.assert_allclose(s.cv.fold_values, fresh.fold_values, rtol=1e-12)
