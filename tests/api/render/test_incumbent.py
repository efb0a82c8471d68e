"""Contract form of the incumbent decision, with its numbers recomputed outside the
service."""

import math

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from service.api.encode import to_jsonable
from service.api.render import renders
from service.core import transforms as tr
from service.core.data import prepare
from service.selection import incumbent as inc
from service.selection.search import select
from service.selection.search_setup import SearchOptions
from sklearn.model_selection import KFold

from tests.typed import predictors, responses, sent

SEED = 3


def _columns(n=150, seed=12):
    """Invented pump-station energy use: log(kwh) = 2 + 0.9 log(flow) + N(0, 0.15^2)."""
    rng = np.random.default_rng(seed)
    flow = np.exp(rng.uniform(math.log(2.0), math.log(200.0), n))
    kwh = np.exp(2.0 + 0.9 * np.log(flow) + rng.normal(0.0, 0.15, n))
    return {"kwh": kwh.tolist(), "flow": flow.tolist()}


RAW = {
    "response": {"column": "kwh", "transform": {"name": "identity"}},
    "predictors": [{"column": "flow", "transform": {"name": "identity"}}],
    "intercept": True,
}


@pytest.fixture(scope="module")
def switched():
    cols = _columns()
    prep = prepare({"columns": cols}, "kwh", ["flow"])
    opts = SearchOptions(
        response_transforms=responses(["identity", "log"]),
        predictor_transforms=predictors(["identity", "log"]),
        top=1,
        seed=SEED,
        incumbent=sent(RAW),
    )
    result = select(prep, opts, "test")
    return cols, result, result.body.incumbent, to_jsonable(result.body)["incumbent"]


def test_the_block_has_the_contract_fields_in_order(switched):
    _, _, typed, block = switched
    assert isinstance(typed, inc.IncumbentDecision) and renders(typed)
    assert list(block) == ["specification", "rank", "cv", "difference", "decision", "reason"]
    assert list(block["difference"]) == ["value", "std_error", "meaning"]
    assert block["difference"]["meaning"] == inc.DIFFERENCE_MEANING
    assert block["specification"] == RAW  # built on this run's rows, written as sent
    assert block["decision"] == typed.decision == "switch"
    assert block["reason"] == typed.reason


def test_the_paired_difference_recomputed_with_kfold_and_statsmodels(switched):
    cols, result, _, block = switched
    y = np.asarray(cols["kwh"])
    X = sm.add_constant(np.asarray(cols["flow"]))
    # source: scikit-learn KFold(5, shuffle=True, random_state=seed) gives the search's
    # folds; statsmodels OLS refits the raw-scale incumbent on each training part
    folds, sizes = [], []
    for train, test in KFold(5, shuffle=True, random_state=SEED).split(X):
        fit = sm.OLS(y[train], X[train]).fit()
        folds.append(math.sqrt(np.mean((y[test] - fit.predict(X[test])) ** 2)))
        sizes.append(test.size)
    folds, sizes = np.asarray(folds), np.asarray(sizes)
    assert block["cv"]["value"] == pytest.approx(
        math.sqrt(np.sum(sizes * folds**2) / sizes.sum()), rel=1e-9
    )
    d = result.winner.cv.fold_values - folds
    assert block["difference"]["value"] == pytest.approx(d.mean(), rel=1e-9)
    # source: scipy.stats.sem (sd with ddof=1 over sqrt(K)) of the paired differences
    assert block["difference"]["std_error"] == pytest.approx(stats.sem(d), rel=1e-9)
    # source: the simulation's construction: the log scale is clearly better
    assert block["difference"]["value"] < -block["difference"]["std_error"]
    assert block["rank"] > 1


def test_an_incumbent_that_cannot_be_fitted_is_written_as_sent():
    raw = {
        "response": {"column": "kwh", "transform": {"name": "box_cox", "lambda": 0.0005}},
        "predictors": [{"column": "flow", "transform": {"name": "log", "shift": "auto"}}],
        "intercept": True,
    }
    as_sent = sent(raw)
    # the typed value reads the small lambda as the log's and leaves the shift to the data
    assert as_sent.spec.response_transform == tr.Transform("box_cox", lam=0.0)
    assert as_sent.spec.predictors[0].transform == tr.Transform("log")
    why = inc.IncumbentDecision(
        None, as_sent.as_sent, None, None, None, "switch", "cannot be fitted"
    )
    assert to_jsonable(why) == {
        "specification": raw,  # shown back exactly as sent
        "rank": None,
        "cv": None,
        "difference": None,
        "decision": "switch",
        "reason": "cannot be fitted",
    }
