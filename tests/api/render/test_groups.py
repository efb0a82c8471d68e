"""Contract form of a grouped selection's parts: its search summary and a failed group."""

import numpy as np
from service.api.encode import to_jsonable
from service.api.errors import record_problem, with_group_problems
from service.api.render import contract
from service.core.data import prepare
from service.core.errors import BudgetError, ErrorRecord
from service.selection.groups import GroupFailure, GroupsSummary, run_grouped
from service.selection.search_setup import SearchOptions

from tests.typed import predictors, responses


def _columns():
    """Invented: two depots with a linear cost each, one with a constant (flat-rate) cost."""
    rng = np.random.default_rng(8)
    x = rng.uniform(1, 20, 90)
    depot = ["east"] * 30 + ["west"] * 30 + ["flat"] * 30
    y = 5.0 + 2.0 * x + rng.normal(0, 1.0, 90)
    y[60:] = 40.0
    return {"cost": y.tolist(), "km": x.tolist(), "depot": depot}


def test_the_grouped_search_summary_counts_groups_and_failures():
    prep = prepare({"columns": _columns()}, "cost", ["km"], group_by="depot")
    opts = SearchOptions(
        response_transforms=responses(["identity"]), predictor_transforms=predictors(["identity"])
    )
    body = run_grouped(prep, opts, "test")
    summary = body.search
    assert isinstance(summary, GroupsSummary)
    # source: the data's construction: three depots, one with a constant response
    assert (summary.groups, summary.failed, summary.complete) == (3, 1, True)
    assert isinstance(body.groups["flat"], GroupFailure)
    out = to_jsonable(body)
    assert out["search"] == {
        "groups": 3,
        "groups_failed": 1,
        "elapsed_s": summary.elapsed_s,
        "complete": True,
    }
    problem = out["groups"]["flat"]["problem"]
    assert problem["status"] == 422 and problem["errors"][0]["pointer"] == "/response"
    # the same entry as the selections endpoint writes through with_group_problems
    again = with_group_problems(run_grouped(prep, opts, "test")).groups["flat"]
    assert again == out["groups"]["flat"]


def test_a_group_out_of_time_is_a_503_problem_entry():
    record = ErrorRecord.of(BudgetError("the time limit ran out before this group"))
    out = contract(GroupFailure(record))
    assert list(out) == ["problem"]
    assert out["problem"] == record_problem(record)
    # source: RFC 9110 sec. 15.6.4 (503 Service Unavailable), the status the service gives
    # a request whose time limit ran out
    assert out["problem"]["status"] == 503
    assert out["problem"]["detail"] == "the time limit ran out before this group"
