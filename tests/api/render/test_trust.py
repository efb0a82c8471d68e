"""Contract form of the trust block: stability (bootstrap) and optimism (nested CV), with
the rendered numbers recomputed outside the service."""

import json
import math

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from service.api.encode import to_jsonable
from service.api.render import contract, renders
from service.core import transforms as tr
from service.core.data import prepare
from service.core.spec import PredictorSpec, Specification
from service.selection import trust as t
from service.selection.search import select
from service.selection.search_setup import SearchOptions
from sklearn.model_selection import KFold
from statsmodels.stats.proportion import proportion_confint

from tests.typed import predictors, responses, spec_dict, spec_of

TRUST_KEYS = [
    "stability",
    "resamples",
    "runner_up",
    "optimism",
    "stability_details",
    "time_limit_s",
    "warnings",
    "elapsed_s",
]
DETAIL_KEYS = [
    "method",
    "source",
    "requested",
    "usable",
    "failed",
    "not_run",
    "complete",
    "wins",
    "interval",
    "interval_level",
    "first",
    "contenders",
    "contender_rule",
    "folds",
    "seed",
    "conditions",
    "estimated_powers_left_out",
    "held_fixed",
    "rule_reproduces_rank_1",
    "problems",
]
OPTIMISM_KEYS = [
    "metric",
    "scale",
    "outer_folds",
    "inner_folds",
    "seed",
    "selected_cv",
    "nested_cv",
    "gap",
    "gap_std_error",
    "ratio",
    "outer_folds_used",
    "winner_selected",
    "complete",
    "folds",
    "source",
    "meaning",
]
FOLD_KEYS = [
    "fold",
    "rows_held_out",
    "selected",
    "selected_specification",
    "same_as_winner",
    "inner_complete",
    "nested_error",
    "winner_error",
]

#: written out here, independent of the service's transform families
FORWARD = {"sqrt": np.sqrt, "reciprocal": lambda x: 1.0 / x, "square": np.square}


def _noise(seed=4, n=60):
    """y independent of two heavy-tailed predictors: the inner searches disagree."""
    rng = np.random.default_rng(seed)
    cols = {f"x{j}": np.exp(rng.normal(0.0, 0.8, n)).tolist() for j in range(2)}
    cols["y"] = (10.0 + rng.normal(0.0, 1.0, n)).tolist()
    return cols


OPTS = SearchOptions(
    response_transforms=responses(["identity"]),
    predictor_transforms=predictors(["sqrt", "reciprocal", "square"]),
    top=1,
)


@pytest.fixture(scope="module")
def noise_trust():
    cols = _noise()
    prep = prepare({"columns": cols}, "y", ["x0", "x1"])
    result = select(prep, OPTS, "test")
    out = t.assess_trust(
        prep, OPTS, result.winner.spec, "test", True, True, resamples=12, selection=result
    )
    return cols, result, out, to_jsonable(out)


def test_the_block_has_the_contract_fields_in_order_and_is_plain_json(noise_trust):
    _, _, typed, body = noise_trust
    assert renders(typed)
    assert list(body) == TRUST_KEYS
    assert list(body["stability_details"]) == DETAIL_KEYS
    assert list(body["optimism"]) == OPTIMISM_KEYS
    assert all(list(f) == FOLD_KEYS for f in body["optimism"]["folds"])
    json.dumps(body, allow_nan=False)  # nothing typed or non-finite is left
    assert body["stability"] == typed.stability.share
    assert body["resamples"] == typed.stability.usable == 12
    assert body["warnings"] == list(typed.warnings)
    assert body["stability_details"]["held_fixed"] == t.HELD_FIXED
    assert body["stability_details"]["contender_rule"] == t.CONTENDER_RULE
    # specifications are written as requests write them, labels as the ranking does
    firsts = body["stability_details"]["first"]
    assert [t.scale_key(spec_of(f["specification"])) for f in firsts] == [
        t.scale_key(f.spec) for f in typed.stability.first
    ]
    assert [f["label"] for f in firsts] == [t.label(f.spec) for f in typed.stability.first]
    assert math.isclose(sum(f["share"] for f in firsts), 1.0)
    for fold, typed_fold in zip(body["optimism"]["folds"], typed.optimism.folds, strict=True):
        assert fold["selected_specification"] == spec_dict(typed_fold.selected)
        assert fold["selected"] == t.label(typed_fold.selected)


def test_the_stability_interval_is_the_wilson_score_interval(noise_trust):
    _, _, _, body = noise_trust
    det = body["stability_details"]
    # source: Wilson (1927) JASA 22:209-212, as computed by
    # statsmodels.stats.proportion.proportion_confint(method="wilson")
    lo, hi = proportion_confint(det["wins"], det["usable"], alpha=0.05, method="wilson")
    assert det["interval"] == pytest.approx([lo, hi], abs=1e-12)
    assert det["interval_level"] == 0.95
    assert body["stability"] == det["wins"] / det["usable"]


def _design(spec: dict, cols: dict, rows: np.ndarray) -> np.ndarray:
    parts = [np.ones(rows.size)]
    for p in spec["predictors"]:
        x = np.asarray(cols[p["column"]], dtype=float)[rows]
        parts.append(FORWARD[p["transform"]["name"]](x))
    return np.column_stack(parts)


def _held_out_rmse(spec: dict, cols: dict, train: np.ndarray, test: np.ndarray) -> float:
    assert spec["response"]["transform"]["name"] == "identity"  # no back-transform needed
    y = np.asarray(cols["y"], dtype=float)
    fit = sm.OLS(y[train], _design(spec, cols, train)).fit()
    resid = y[test] - fit.predict(_design(spec, cols, test))
    return float(np.sqrt(np.mean(resid**2)))


def test_the_nested_cv_gap_recomputed_with_kfold_and_statsmodels(noise_trust):
    cols, result, _, body = noise_trust
    op = body["optimism"]
    winner = to_jsonable(result.body.ranking[0])["specification"]
    n = len(cols["y"])
    # source: scikit-learn KFold(shuffle=True, random_state=seed) gives the outer folds
    # (the search's own partition); statsmodels OLS refits each selected specification on
    # the training part and predicts the held-out fold on the original scale
    splits = list(
        KFold(op["outer_folds"], shuffle=True, random_state=op["seed"]).split(np.zeros(n))
    )
    nested, winner_errors, sizes = [], [], []
    for (train, test), fold in zip(splits, op["folds"], strict=True):
        assert fold["rows_held_out"] == test.size
        nested.append(_held_out_rmse(fold["selected_specification"], cols, train, test))
        winner_errors.append(_held_out_rmse(winner, cols, train, test))
        sizes.append(test.size)
        assert fold["nested_error"] == pytest.approx(nested[-1], rel=1e-9)
        assert fold["winner_error"] == pytest.approx(winner_errors[-1], rel=1e-9)
        assert fold["same_as_winner"] == (fold["selected_specification"] == winner)
    nested, winner_errors, sizes = map(np.asarray, (nested, winner_errors, sizes))
    # pooled over the outer folds: every held-out row once (RMSE of all held-out rows)
    pooled_nested = math.sqrt(np.sum(sizes * nested**2) / np.sum(sizes))
    pooled_winner = math.sqrt(np.sum(sizes * winner_errors**2) / np.sum(sizes))
    assert op["nested_cv"] == pytest.approx(pooled_nested, rel=1e-9)
    assert op["selected_cv"] == pytest.approx(pooled_winner, rel=1e-9)
    assert op["gap"] == pytest.approx(pooled_nested - pooled_winner, rel=1e-7, abs=1e-12)
    assert op["ratio"] == pytest.approx(pooled_nested / pooled_winner, rel=1e-9)
    # source: scipy.stats.sem (standard deviation with ddof=1 over sqrt(K)) of the
    # fold-by-fold differences
    assert op["gap_std_error"] == pytest.approx(stats.sem(nested - winner_errors), rel=1e-7)
    # the case is informative: some inner search chose another specification
    assert 0 < op["winner_selected"] < op["outer_folds"]


def _spec(name: str) -> Specification:
    return Specification("y", tr.Transform("identity"), (PredictorSpec("x", tr.Transform(name)),))


def test_an_unmeasured_optimism_keeps_its_fields_and_says_why():
    never = t.Optimism("rmse", 5, 3, 7, problem="rank 1 cannot be scored on the outer folds: x")
    out = contract(never)
    assert out == {
        "metric": "rmse",
        "scale": "original",
        "outer_folds": 5,
        "inner_folds": 3,
        "seed": 7,
        "selected_cv": None,
        "nested_cv": None,
        "gap": None,
        "gap_std_error": None,
        "ratio": None,
        "complete": False,
        "problem": "rank 1 cannot be scored on the outer folds: x",
    }
    folds = (
        t.OuterFold(1, 12, problem="not run: the time limit was reached"),
        t.OuterFold(2, 12, selected=_spec("sqrt"), problem="cannot predict"),
    )
    out = to_jsonable(t.Optimism("mae", 2, 2, 0, folds=folds, problem="none assessed"))
    assert list(out)[-2:] == ["folds", "problem"]
    assert out["folds"] == [
        {"fold": 1, "rows_held_out": 12, "problem": "not run: the time limit was reached"},
        {"fold": 2, "rows_held_out": 12, "selected": "y on sqrt(x)", "problem": "cannot predict"},
    ]


def test_a_trust_block_without_measures_has_no_details():
    out = to_jsonable(t.Trust(None, None, 30.0, ("a warning",), 0.5))
    assert out == {
        "stability": None,
        "resamples": None,
        "runner_up": None,
        "optimism": None,
        "time_limit_s": 30.0,
        "warnings": ["a warning"],
        "elapsed_s": 0.5,
    }


def test_the_runner_up_and_a_held_power_are_written_out():
    runner = t.RunnerUp(_spec("reciprocal"), 0.25, t.RUNNER_UP_FIRST)
    assert contract(runner) == {
        "specification": {
            "response": {"column": "y", "transform": {"name": "identity"}},
            "predictors": [{"column": "x", "transform": {"name": "reciprocal"}}],
            "intercept": True,
        },
        "label": "y on 1/x",
        "first_share": 0.25,
        "basis": t.RUNNER_UP_FIRST,
    }
    st = t.Stability(
        share=0.75,
        runner_up=runner,
        requested=4,
        usable=4,
        not_run=0,
        wins=3,
        first=(t.FirstShare(_spec("sqrt"), 0.75), t.FirstShare(_spec("reciprocal"), 0.25)),
        contenders=2,
        folds=5,
        seed=0,
        estimated_powers_left_out=1,
        rank_1_power_held=True,
        rule_reproduces_rank_1=True,
        problems=(t.ResampleProblem("only 3 distinct rows were drawn", 2),),
    )
    det = contract(st)
    assert det["held_fixed"] == t.HELD_FIXED + t.HELD_FIXED_RANK_1
    assert det["failed"] == 2 and det["complete"] is True
    assert det["problems"] == [{"reason": "only 3 distinct rows were drawn", "resamples": 2}]
    assert [f["label"] for f in det["first"]] == ["y on sqrt(x)", "y on 1/x"]
    # source: statsmodels proportion_confint(method="wilson"), 3 of 4
    assert det["interval"] == pytest.approx(
        list(proportion_confint(3, 4, alpha=0.05, method="wilson")), abs=1e-12
    )
