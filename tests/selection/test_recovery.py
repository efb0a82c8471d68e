"""Simulated data with a known right scale: the search must find it (and not over-transform).

Every simulation is seeded.  Designs are chosen so that the right scale is identifiable by
original-scale CV error: the relation bends over one to two decades of the response, with
modest noise on the right scale.  Expectations are fixed in advance from the generating model.
"""

from __future__ import annotations

import numpy as np
import pytest
from service.core.data import prepare
from service.core.likelihood import estimate_lambda
from service.selection.search import run_selection
from service.selection.search_setup import SearchOptions

from tests.typed import predictors as choices
from tests.typed import spec_dict

SEEDS = [11, 12, 13]


def _select(columns: dict, response: str, predictors: list[str], **opts) -> dict:
    prep = prepare(
        {"columns": {k: np.asarray(v, float).tolist() for k, v in columns.items()}},
        response,
        predictors,
    )
    return run_selection(prep, SearchOptions(**opts), "test")


def _top(out: dict) -> tuple[dict, list[dict]]:
    spec = spec_dict(out.ranking[0].specification)
    return spec["response"]["transform"], [p["transform"] for p in spec["predictors"]]


def _is_log_scale(t: dict, y: np.ndarray, X: np.ndarray) -> bool:
    """log, or an estimated Box-Cox whose 95% interval (on this design) contains 0."""
    if t["name"] == "log":
        return not t.get("shift")
    if t["name"] == "box_cox":
        est = estimate_lambda("box_cox", y, X)
        lo = -np.inf if est.ci_low is None else est.ci_low
        hi = np.inf if est.ci_high is None else est.ci_high
        return lo < 0.0 < hi
    return False


@pytest.mark.parametrize("seed", SEEDS)
def test_multiplicative_errors_pick_a_log_response(seed):
    rng = np.random.default_rng(seed)
    n = 200
    x = rng.uniform(0, 5, n)
    # source: generating model log y = 1 + 0.8 x + e, e ~ N(0, 0.25^2) (multiplicative errors)
    y = np.exp(1.0 + 0.8 * x + rng.normal(0, 0.25, n))
    out = _select({"y": y, "x": x}, "y", ["x"])
    resp, preds = _top(out)
    X = np.column_stack([np.ones(n), x])
    assert _is_log_scale(resp, y, X), spec_dict(out.ranking[0].specification)
    assert preds[0]["name"] == "identity"


@pytest.mark.parametrize("seed", SEEDS)
def test_power_law_picks_log_log(seed):
    rng = np.random.default_rng(seed)
    n = 200
    x = np.exp(rng.uniform(0, 5, n))
    # source: generating model y = 2 x^0.75 e (allometric power law), log e ~ N(0, 0.1^2).
    # (With log e ~ N(0, 0.25^2) the bend of x^0.75 is lost in the noise of the largest y and
    # the untransformed fit lies within one standard error, so the one-SE rule rightly keeps it.)
    y = 2.0 * x**0.75 * np.exp(rng.normal(0, 0.1, n))
    out = _select({"y": y, "x": x}, "y", ["x"])
    resp, preds = _top(out)
    X = np.column_stack([np.ones(n), np.log(x)])
    assert _is_log_scale(resp, y, X), spec_dict(out.ranking[0].specification)
    assert preds[0]["name"] == "log" and not preds[0].get("shift")


@pytest.mark.parametrize("seed", SEEDS)
def test_additive_linear_relation_is_not_transformed(seed):
    rng = np.random.default_rng(seed)
    n = 200
    x1 = rng.uniform(1, 10, n)
    x2 = rng.uniform(1, 10, n)
    # source: generating model y = 3 + 2 x1 - 1.5 x2 + e, e ~ N(0, 1): the identity scale is right
    y = 30.0 + 2.0 * x1 - 1.5 * x2 + rng.normal(0, 1.0, n)
    out = _select({"y": y, "x1": x1, "x2": x2}, "y", ["x1", "x2"])
    resp, preds = _top(out)
    assert resp["name"] == "identity", spec_dict(out.ranking[0].specification)
    assert [p["name"] for p in preds] == ["identity", "identity"]


@pytest.mark.parametrize("seed", SEEDS)
def test_cube_root_law_recovers_box_cox_one_third(seed):
    rng = np.random.default_rng(seed)
    n = 300
    d = rng.uniform(8, 20, n)  # diameter
    h = rng.uniform(60, 90, n)  # height
    # source: physical law (volume ~ diameter^2 x height, so volume^(1/3) is linear in lengths,
    # a dimensional argument as for the black cherry trees); generated exactly on that scale
    v = (0.1 + 0.15 * d + 0.015 * h + rng.normal(0, 0.08, n)) ** 3
    X = np.column_stack([np.ones(n), d, h])
    est = estimate_lambda("box_cox", v, X)
    assert est.ci_low < 1.0 / 3.0 < est.ci_high
    assert est.ci_low > 0.0 and est.ci_high < 1.0  # excludes log and no transform
    out = _select(
        {"v": v, "d": d, "h": h}, "v", ["d", "h"], predictor_transforms=choices(["identity"])
    )
    info = out.search.box_cox.reported
    # the search reports the same regression lambda on the untransformed design
    assert info.design == "untransformed predictors"
    assert info.estimate.lam == pytest.approx(est.lam, abs=1e-4)
    assert info.estimate.ci_low < 1.0 / 3.0 < info.estimate.ci_high
    assert out.ranking[0].specification.response_transform.name != "identity"


def test_ranking_lists_each_specification_once():
    rng = np.random.default_rng(SEEDS[0])
    n = 200
    x = rng.uniform(0, 5, n)
    y = np.exp(1.0 + 0.8 * x + rng.normal(0, 0.25, n))  # Box-Cox interval holds 0: rung = log
    out = _select(
        {"y": y, "x": x}, "y", ["x"], predictor_transforms=choices(["identity", "log"]), top=20
    )
    specs = [repr(spec_dict(e.specification)) for e in out.ranking]
    assert len(specs) == len(set(specs)), specs


def _factorial(seed: int, kind: str):
    """A 3 x 3 x 3 factorial (27 runs, levels 1, 3, 9) generated on a simple scale."""
    import itertools

    rng = np.random.default_rng(seed)
    lv = [1.0, 3.0, 9.0]
    X = np.array(list(itertools.product(lv, lv, lv)))
    n = len(X)
    if kind == "power law":
        eta = 1 + 0.6 * np.log(X[:, 0]) + 0.4 * np.log(X[:, 1]) - 0.3 * np.log(X[:, 2])
        y = np.exp(eta + rng.normal(0, 0.15, n))
        expected = ("log", ["log", "log", "log"])
    else:
        y = 5 + 1.0 * X[:, 0] + 0.5 * X[:, 1] - 0.3 * X[:, 2] + rng.normal(0, 1.0, n)
        expected = ("identity", ["identity", "identity", "identity"])
    return {"y": y, "a": X[:, 0], "b": X[:, 1], "c": X[:, 2]}, expected


@pytest.mark.parametrize("kind", ["power law", "linear"])
def test_small_designed_experiments_let_the_simple_scale_win(kind):
    # source: simulation with known truth; a power law (log response on logged factors) and
    # a linear response in 27 runs.  Before the small-sample rule the full search (625-744
    # candidates) ranked the all-log power law first in 0 of 6 seeds and the linear model
    # in 4 of 6; with every predictor on one scale it is 7/10 and 8/10 (seeds 0-9)
    hits = 0
    for seed in range(6):
        cols, expected = _factorial(seed, kind)
        out = _select(cols, "y", ["a", "b", "c"], seed=seed)
        assert out.search.considered <= 14
        assert any("fewer than 50" in w for w in out.warnings)
        spec = spec_dict(out.ranking[0].specification)
        got = (
            spec["response"]["transform"]["name"],
            [p["transform"]["name"] for p in spec["predictors"]],
        )
        hits += got == expected
    assert hits >= 4


@pytest.mark.parametrize(
    "process",
    [
        "log-log power law",
        "sqrt predictor",
        "categorical, log response",
        "identity, 3 predictors",
        "mixed",
    ],
)
def test_seeded_recovery_study(process):
    # source: simulation with known truth (tests/benchmarks/recovery.py, the hand-run study
    # whose table is in README.md); one seed per process at n = 300
    from tests.benchmarks.recovery import one_run

    _, _, _, hit, label, why = one_run((process, 300, 0))
    assert hit, (label, why)
