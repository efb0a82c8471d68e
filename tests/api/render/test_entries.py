"""Contract form of a ranking entry's parts (service/api/render/entries.py): the score block,
its parts in the documented order, and the conditions once compared."""

import numpy as np
import pytest
from scipy import stats
from service.api.encode import to_jsonable
from service.api.render import contract
from service.core import transforms as tr
from service.core.cvresult import CVResult
from service.core.spec import PredictorSpec, Specification
from service.selection.entries import ConditionCount, Score, ScoreParts, Simplicity
from service.selection.search import IN_BAND_RULE, OUT_OF_BAND_RULE, rank
from service.selection.search_setup import Scored

RANKED_KEYS = [
    "cv_value",
    "cv_std_error",
    "best_cv_value",
    "difference_from_best",
    "paired_std_error",
    "one_se_threshold",
    "within_one_se",
    "simplicity",
    "rule",
]


def _scored(resp: str, pred: str, folds: list[float]) -> Scored:
    spec = Specification(
        "y", tr.from_dict({"name": resp}), (PredictorSpec("x", tr.from_dict({"name": pred})),)
    )
    fv = np.asarray(folds, float)
    # source: scipy.stats.sem for the standard error of the K fold errors
    value, se = float(fv.mean()), float(stats.sem(fv))
    return Scored(spec, CVResult("rmse", value, se, fv, {"rmse": value}))


def test_ranked_parts_render_in_the_documented_order_with_reference_numbers():
    best = _scored("log", "log", [9.5, 10.5, 9.8, 10.2, 10.0])
    noisy = _scored("identity", "identity", [5, 16, 7, 14, 11])
    ranked, lowest = rank([best, noisy], folds=5)
    by = {id(s): contract(p) for s, p in ranked}
    out = by[id(noisy)]
    assert list(out) == RANKED_KEYS
    # source: scipy.stats.sem of the paired fold differences (standard error of a mean of
    # K paired differences)
    diff = noisy.cv.fold_values - best.cv.fold_values
    assert out["paired_std_error"] == pytest.approx(stats.sem(diff), rel=1e-12)
    assert out["difference_from_best"] == pytest.approx(np.mean(diff), rel=1e-12)
    # source: Hastie, Tibshirani & Friedman (2009) sec. 7.10: lowest error plus its
    # standard error
    assert out["one_se_threshold"] == pytest.approx(10.0 + stats.sem(best.cv.fold_values))
    assert out["best_cv_value"] == lowest == pytest.approx(10.0)
    assert out["within_one_se"] is False and out["rule"] == OUT_OF_BAND_RULE
    assert by[id(best)]["rule"] == IN_BAND_RULE
    # log response and log predictor: nothing estimated, two transformed columns
    assert by[id(best)]["simplicity"] == {
        "estimated": 0,
        "readability": Specification.simplicity(best.spec)[1],
        "transformed_columns": 2,
    }


def test_compared_conditions_follow_the_rule_and_only_once_compared():
    parts = ScoreParts(2.0, 0.5, 2.0, 2.5, True, Simplicity(0, 1, 1), "r", 0.0, 0.0)
    assert "conditions_failed" not in contract(parts)
    compared = ScoreParts(
        **{**parts.__dict__, "conditions": ConditionCount(("normality",), ("normality", "x"))}
    )
    out = contract(compared)
    assert list(out)[-2:] == ["conditions_failed", "conditions_not_holding"]
    assert out["conditions_failed"] == ["normality"]
    assert out["conditions_not_holding"] == ["normality", "x"]
    failed_fit = ScoreParts(
        **{**parts.__dict__, "conditions": ConditionCount(None, note="singular design")}
    )
    out = contract(failed_fit)
    assert out["conditions_failed"] is None and out["conditions_note"] == "singular design"
    assert "conditions_not_holding" not in out


def test_a_single_specifications_score_has_no_distance_from_a_best():
    parts = ScoreParts(
        3.0, 0.2, 3.0, 3.2, True, Simplicity(1, 2, 1), "alone", conditions=ConditionCount(())
    )
    out = to_jsonable({"score": Score(1.0, parts)})["score"]
    assert out["cv_ratio"] == 1.0
    assert list(out["parts"]) == [
        "cv_value",
        "cv_std_error",
        "best_cv_value",
        "one_se_threshold",
        "within_one_se",
        "simplicity",
        "rule",
        "conditions_failed",
    ]
    assert out["parts"]["conditions_failed"] == []
