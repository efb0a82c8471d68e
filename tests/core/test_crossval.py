"""K-fold cross-validation on the original scale, reproduced by an independent loop.

The independent loop uses scikit-learn's KFold for the partitions, statsmodels OLS for each
training fold, scipy for the forward transforms and writes Duan's (1983) smearing estimate
out: yhat = mean_i g^-1(x'b + e_i) over the training residuals e_i.  Tolerances (fixed in
advance): CV RMSE with the same fold assignment and a fixed transform rel 1e-8; smearing fast
paths against the exact double sum rel 1e-8.
"""

from __future__ import annotations

import math
import zlib

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from service.core import retransform
from service.core import transforms as tr
from service.core.crossval import cross_validate
from service.core.data import prepare
from service.core.folds import make_plan
from service.core.spec import build_design
from service.selection.search import run_selection
from service.selection.search_setup import SearchOptions
from sklearn.model_selection import KFold


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


@pytest.mark.parametrize(
    "n, folds, repeats, seed",
    [(10, 5, 1, 0), (23, 5, 4, 7), (101, 10, 3, 99), (16, 2, 2, 2**32 - 1)],
)
def test_make_plan_equals_kfold_for_every_repeat(n, folds, repeats, seed):
    plan = make_plan(n, folds, repeats, seed)
    rs = np.random.RandomState(seed)
    for a in plan.assignments:
        expected = np.empty(n, dtype=int)
        # source: sklearn KFold driven by one shared RandomState (successive permutations)
        splits = KFold(folds, shuffle=True, random_state=rs).split(np.zeros(n))
        for k, (_, test) in enumerate(splits):
            expected[test] = k
        assert np.array_equal(a, expected)
        sizes = np.bincount(a, minlength=folds)
        assert sizes.max() - sizes.min() <= 1


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
        response_transforms=["identity", "log", "sqrt", "box_cox"],
        predictor_transforms=["identity", "log"],
        folds=4,
        repeats=2,
        seed=17,
    )
    out = run_selection(prep, opts, "test")
    assert len(out["_scored"]) >= 8
    for s in out["_scored"]:
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


# ------------------------------------------- smearing: fast paths vs exact
def _smear_case(seed: int):
    """A seeded configuration with n_test * n_train > EXACT_LIMIT (so a fast path runs)."""
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
    m = retransform.EXACT_LIMIT // n + int(rng.integers(1, 4000))
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
    assert eta.size * e.size > retransform.EXACT_LIMIT  # a fast path is taken
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
        # singular point far from every eta + e_i: the quadrature rule applies
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
