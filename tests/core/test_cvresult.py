"""What a scoring returns and how its errors are formed (service/core/cvresult.py).

References: scikit-learn's metrics (mean_squared_error, mean_absolute_error,
mean_absolute_percentage_error) for the three errors; Python's statistics module for the
standard deviation behind the standard error.
"""

from __future__ import annotations

import math
import statistics

import numpy as np
import pytest
from service.core.cvresult import (
    CVReport,
    CVResult,
    Metrics,
    error_of,
    pooled_folds,
    std_error_of,
    summary_of,
)
from service.core.folds import make_plan
from sklearn.metrics import (
    mean_absolute_error,
    mean_absolute_percentage_error,
    mean_squared_error,
)


def _rows(n=40, seed=3):
    rng = np.random.default_rng(seed)
    y = rng.uniform(5, 50, n)
    mean = y + rng.normal(0, 3, n)
    median = y + rng.normal(0, 2, n)
    return y, mean, median


def _losses(y, mean, median):
    return (y - mean) ** 2, np.abs(y - median), np.abs((y - median) / y)


def test_the_three_errors_are_scikit_learns():
    y, mean, median = _rows()
    sq, ab, pc = _losses(y, mean, median)
    # source: scikit-learn metrics on the same predictions (MAPE there is a fraction)
    assert float(error_of("rmse", sq, ab, pc)) == pytest.approx(
        math.sqrt(mean_squared_error(y, mean)), rel=1e-13
    )
    assert float(error_of("mae", sq, ab, pc)) == pytest.approx(
        mean_absolute_error(y, median), rel=1e-13
    )
    assert float(error_of("mape", sq, ab, pc)) == pytest.approx(
        100.0 * mean_absolute_percentage_error(y, median), rel=1e-13
    )
    assert math.isnan(float(error_of("mape", sq, ab, None)))


def test_candidates_side_by_side_get_their_own_errors():
    cols = [_rows(seed=s) for s in range(4)]
    y = cols[0][0]
    losses = [_losses(y, m, md) for _, m, md in cols]
    sq, ab, pc = (np.stack([lo[i] for lo in losses], axis=1) for i in range(3))
    for metric in ("rmse", "mae", "mape"):
        got = error_of(metric, sq, ab, pc)
        assert got.shape == (4,)
        for j, (_, m, md) in enumerate(cols):
            # source: scikit-learn metrics, one candidate at a time
            want = {
                "rmse": math.sqrt(mean_squared_error(y, m)),
                "mae": mean_absolute_error(y, md),
                "mape": 100.0 * mean_absolute_percentage_error(y, md),
            }[metric]
            assert got[j] == pytest.approx(want, rel=1e-13)


@pytest.mark.parametrize("metric", ["rmse", "mae", "mape"])
def test_fold_errors_pool_to_the_error_of_their_rows_together(metric):
    y, mean, median = _rows(n=37)
    plan = make_plan(37, 5, 1, seed=2)
    folds = [np.flatnonzero(plan.assignments[0] == k) for k in range(5)]
    sq, ab, pc = _losses(y, mean, median)
    values = np.array([float(error_of(metric, sq[f], ab[f], pc[f])) for f in folds])
    sizes = np.array([f.size for f in folds])
    keep = [0, 2, 3]  # folds 1, 3 and 4 only
    rows = np.concatenate([folds[k] for k in keep])
    # source: scikit-learn metrics on the union of the kept folds' rows
    want = {
        "rmse": math.sqrt(mean_squared_error(y[rows], mean[rows])),
        "mae": mean_absolute_error(y[rows], median[rows]),
        "mape": 100.0 * mean_absolute_percentage_error(y[rows], median[rows]),
    }[metric]
    assert pooled_folds(metric, values[keep], sizes[keep]) == pytest.approx(want, rel=1e-12)


def test_repeats_are_averaged_and_the_standard_error_divides_by_root_k():
    s = summary_of(np.array([2.0, 4.0]), np.array([1.0, 3.0]), None)
    # source: arithmetic means of the repeats' values written above
    assert s == Metrics(rmse=3.0, mae=2.0, mape=None)
    assert (s.of("rmse"), s.of("mae"), s.of("mape")) == (3.0, 2.0, None)
    with pytest.raises(KeyError):
        s.of("r2")
    fv = np.array([1.0, 2.0, 4.0, 3.0, 5.0, 2.5])
    # source: Python's statistics.stdev (n - 1 denominator), over sqrt(K) with K = 3 folds
    assert std_error_of(fv, 3) == pytest.approx(statistics.stdev(fv.tolist()) / math.sqrt(3))
    assert std_error_of(np.array([1.0]), 1) == 0.0


def test_the_report_names_plan_and_back_transform():
    plan = make_plan(30, 5, 2, seed=7, metric="mae")
    res = CVResult("mae", 1.5, 0.2, np.ones(10), Metrics(2.0, 1.5, None))
    r = CVReport.of(res, plan)
    assert (r.folds, r.repeats, r.seed, r.scheme) == (5, 2, 7, "random")
    assert (r.metric, r.value, r.std_error) == ("mae", 1.5, 0.2)
    assert r.all_metrics.mape is None
    # source: the median minimises expected absolute error, the mean squared error
    assert r.back_transform == "median (naive inverse)"
    rmse = CVReport.of(CVResult("rmse", 1, 0, np.ones(2), Metrics(1.0, 1.0, None)), plan)
    assert rmse.back_transform.startswith("smeared mean")


def test_engel_fold_errors_pool_to_the_published_pooled_rmse():
    from service.core import transforms as tr
    from service.core.crossval import cross_validate
    from statsmodels.datasets import engel

    d = engel.load_pandas().data
    y = d["foodexp"].to_numpy(float)
    X = np.column_stack([np.ones(y.size), np.log(d["income"].to_numpy(float))])
    plan = make_plan(y.size, 5, 1, 0)
    res = cross_validate(X, y, tr.Transform("log"), plan, False)
    sizes = np.bincount(plan.assignments[0], minlength=5)
    # source: CHECKS_PUBLIC engel `log(foodexp) on log(income)`: pooled
    # smeared 5-fold CV RMSE 118.99743365830672 (KFold(5, shuffle=True, random_state=0))
    assert res.value == pytest.approx(118.99743365830672, rel=1e-8)
    assert pooled_folds("rmse", res.fold_values, sizes) == pytest.approx(
        118.99743365830672, rel=1e-8
    )
    # source: the same table's definitions: the fold-mean RMSE is not the pooled one
    assert float(np.mean(res.fold_values)) != pytest.approx(118.99743365830672, rel=1e-8)
