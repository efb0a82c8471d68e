"""Contract form of a selection body (service/api/render/selection.py): one table's and a
grouped one's, in the documented order, finished or not."""

from dataclasses import replace

import numpy as np
import pytest
from service.api.encode import to_jsonable
from service.api.render.selection import grouped, selection
from service.core.data import prepare
from service.selection.groups import GroupFailure, run_grouped
from service.selection.request import Service, finish_body
from service.selection.search import select
from service.selection.search_setup import SearchOptions

from tests.typed import predictors, responses, sent

OPTS = SearchOptions(
    response_transforms=responses(["identity", "log"]),
    predictor_transforms=predictors(["identity"]),
)


def _columns(n=60, seed=2):
    rng = np.random.default_rng(seed)
    x = rng.uniform(1, 10, n)
    y = np.exp(0.2 * x + rng.normal(0, 0.1, n))
    return {"y": y.tolist(), "x": x.tolist()}


def test_a_finished_body_has_the_version_first_and_the_cautions_last():
    prep = prepare({"columns": _columns()}, "y", ["x"])
    body = select(prep, OPTS, "t").body
    assert list(selection(body)) == ["data", "search", "ranking", "warnings"]
    done = finish_body(body, OPTS, Service("v1"))
    out = to_jsonable(done)
    assert list(out) == ["service_version", "data", "search", "ranking", "warnings", "cautions"]
    assert out["service_version"] == "v1" and out["cautions"] == list(done.cautions)
    # source: numpy least squares of log(y) on x, the rank-1 scale of this construction
    x, y = np.asarray(_columns()["x"]), np.asarray(_columns()["y"])
    coef = np.linalg.lstsq(np.column_stack([np.ones_like(x), x]), np.log(y), rcond=None)[0]
    first = out["ranking"][0]
    assert first["rank"] == 1 and first["specification"]["response"]["transform"]["name"] == "log"
    assert [c["estimate"] for c in first["coefficients"]] == pytest.approx(coef, rel=1e-9)
    assert out["data"]["rows_used"] == 60 and out["search"]["candidates_scored"] == 2


def test_trust_follows_the_warnings_and_an_incumbent_precedes_them():
    prep = prepare({"columns": _columns()}, "y", ["x"])
    body = select(prep, OPTS, "t").body
    keys = list(to_jsonable(replace(body, incumbent=None, trust=None)))
    assert keys == ["data", "search", "ranking", "warnings"]
    inc = {"response": {"column": "y"}, "predictors": [{"column": "x"}]}
    with_inc = select(prep, replace(OPTS, incumbent=sent(inc)), "t").body
    assert list(to_jsonable(with_inc)) == ["data", "search", "ranking", "incumbent", "warnings"]


def test_a_grouped_body_lists_each_group_under_groups_with_an_empty_ranking():
    cols = _columns(90)
    cols["depot"] = ["a"] * 30 + ["b"] * 30 + ["flat"] * 30
    cols["y"][60:] = [5.0] * 30  # a constant response cannot be modelled
    prep = prepare({"columns": cols}, "y", ["x"], group_by="depot")
    body = run_grouped(prep, OPTS, "t")
    assert isinstance(body.groups["flat"], GroupFailure)
    assert "service_version" not in grouped(body) and grouped(body)["ranking"] == []
    out = to_jsonable(finish_body(body, OPTS, Service("v1")))
    assert list(out) == [
        "service_version",
        "data",
        "search",
        "ranking",
        "groups",
        "warnings",
        "cautions",
    ]
    assert out["ranking"] == [] and sorted(out["groups"]) == ["a", "b", "flat"]
    assert out["groups"]["a"]["ranking"][0]["rank"] == 1
    assert out["groups"]["flat"]["problem"]["status"] == 422
