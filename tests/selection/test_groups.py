"""One selection per group value (``group_by``), over HTTP and over worker processes.

Invented data: repair costs of water mains in four districts.  Two districts follow
log(cost) = 4 + 0.7 log(length) + N(0, 0.2^2); one has only three repairs (too few to
cross-validate) and one bills every repair at a flat rate (constant response).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from fastapi.testclient import TestClient
from service.api.encode import to_jsonable
from service.api.errors import record_problem, with_group_problems
from service.app import app
from service.core.data import prepare, split_groups
from service.core.errors import ErrorRecord, Response
from service.selection.deadline import Deadline
from service.selection.entries import EntryReport
from service.selection.groups import (
    GroupFailure,
    GroupTask,
    GroupTrust,
    group_parts,
    run_grouped,
    select_group,
)
from service.selection.search_setup import SearchOptions
from service.selection.workers import map_in_processes
from service.settings import get_settings

from tests.typed import predictors, responses

URL = "/v1/selections"


@pytest.fixture(scope="module")
def client():
    with TestClient(app, raise_server_exceptions=False) as c:
        yield c


def _district_columns() -> dict:
    rng = np.random.default_rng(21)
    sizes = {"north": 80, "south": 70, "east": 3, "hill": 30}
    district, length, cost = [], [], []
    for name, n in sizes.items():
        ln = np.round(np.exp(rng.uniform(math.log(5.0), math.log(500.0), n)), 1)
        c = np.round(np.exp(4.0 + 0.7 * np.log(ln) + rng.normal(0.0, 0.2, n)), 2)
        if name == "hill":
            c = np.full(n, 950.0)  # flat-rate contract: nothing to model
        district += [name] * n
        length += ln.tolist()
        cost += c.tolist()
    return {"district": district, "pipe_length_m": length, "repair_cost": cost}


COLUMNS = _district_columns()
SEARCH = {"response": ["identity", "log"], "predictors": ["identity", "log"]}


def _request(columns=COLUMNS, **over) -> dict:
    body = {
        "data": {"columns": columns},
        "response": "repair_cost",
        "predictors": ["pipe_length_m"],
        "group_by": "district",
        "transforms": SEARCH,
        "top": 2,
    }
    body.update(over)
    return body


def _without_timing(obj):
    if isinstance(obj, dict):
        return {k: _without_timing(v) for k, v in obj.items() if k != "elapsed_s"}
    if isinstance(obj, list):
        return [_without_timing(v) for v in obj]
    return obj


def test_failing_groups_get_problems_while_the_others_succeed(client):
    r = client.post(URL, json=_request())
    assert r.status_code == 200, r.text
    body = r.json()
    groups = body["groups"]
    assert list(groups) == ["east", "hill", "north", "south"]  # sorted values
    assert body["search"]["groups"] == 4 and body["search"]["groups_failed"] == 2
    assert any("2 groups could not be modelled" in w for w in body["warnings"])
    east, hill = groups["east"]["problem"], groups["hill"]["problem"]
    # the group's table is short, not the folds option: the problem points at the data
    assert east["status"] == 422 and east["errors"][0]["pointer"].startswith("/data/")
    assert "3 usable rows, fewer than the" in east["detail"]
    assert hill["status"] == 422 and hill["errors"][0]["pointer"] == "/response"
    assert "constant" in hill["detail"]
    for name in ("north", "south"):
        top = groups[name]["ranking"][0]["specification"]
        # source: the simulation's construction (log-log in these districts)
        assert top["response"]["transform"]["name"] == "log"
        assert top["predictors"][0]["transform"]["name"] == "log"
        assert groups[name]["cautions"] and groups[name]["service_version"]


def test_a_group_body_equals_a_request_for_that_group_alone(client):
    grouped = client.post(URL, json=_request()).json()["groups"]["south"]
    # the same table with every other district's cost missing: those rows are dropped, the
    # south rows keep their row numbers, so everything but the data summary must agree
    alone = dict(COLUMNS)
    alone["repair_cost"] = [
        c if d == "south" else None
        for c, d in zip(COLUMNS["repair_cost"], COLUMNS["district"], strict=True)
    ]
    req = _request(alone)
    req.pop("group_by")
    r = client.post(URL, json=req)
    assert r.status_code == 200, r.text
    single = r.json()
    assert single["data"]["rows_used"] == grouped["data"]["rows_used"] == 70
    grouped.pop("data"), single.pop("data")
    assert _without_timing(grouped) == _without_timing(single)


def test_too_many_groups_is_a_problem_at_group_by(client, monkeypatch):
    monkeypatch.setenv("BESTSCALE_MAX_GROUPS", "3")
    get_settings.cache_clear()
    try:
        r = client.post(URL, json=_request())
    finally:
        monkeypatch.delenv("BESTSCALE_MAX_GROUPS")
        get_settings.cache_clear()
    assert r.status_code == 422
    assert r.headers["content-type"].startswith("application/problem+json")
    err = r.json()["errors"][0]
    assert err["pointer"] == "/group_by" and "4 values" in err["detail"]


def test_group_column_missing_from_the_data_points_at_group_by(client):
    r = client.post(URL, json=_request(group_by="zone"))
    assert r.status_code == 422
    assert "/group_by" in [e["pointer"] for e in r.json()["errors"]]


def test_an_unusable_group_is_kept_as_a_record_naming_the_place():
    prep = prepare({"columns": COLUMNS}, "repair_cost", ["pipe_length_m"], group_by="district")
    failure = group_parts(prep)["hill"]  # flat-rate billing: a constant response
    assert isinstance(failure, GroupFailure)
    hill = failure.record
    assert isinstance(hill, ErrorRecord) and not hill.over_budget
    assert [p.where for p in hill.problems] == [Response()]
    rendered = record_problem(hill)
    assert rendered["status"] == 422 and rendered["errors"][0]["pointer"] == "/response"
    # written wherever it sits in a body as the selections endpoint writes a group's problem
    assert to_jsonable({"groups": {"hill": failure}})["groups"]["hill"] == {"problem": rendered}


def test_groups_in_worker_processes_equal_the_in_process_run():
    prep = prepare({"columns": COLUMNS}, "repair_cost", ["pipe_length_m"], group_by="district")
    opts = SearchOptions(
        response_transforms=responses(SEARCH["response"]),
        predictor_transforms=predictors(SEARCH["predictors"]),
        top=2,
    )
    in_process = with_group_problems(run_grouped(prep, opts, "test")).groups
    parts = group_parts(prep)
    tasks = [GroupTask(p, opts, "test") for p in parts.values()]
    pooled = dict(zip(parts, map_in_processes(select_group, tasks, processes=2), strict=True))
    pooled = with_group_problems({"groups": pooled})["groups"]
    assert list(pooled) == list(in_process)
    # bit-identical JSON apart from timing fields
    assert _without_timing(to_jsonable(pooled)) == _without_timing(to_jsonable(in_process))


def test_a_group_worker_can_assess_trust_for_its_group():
    prep = prepare({"columns": COLUMNS}, "repair_cost", ["pipe_length_m"], group_by="district")
    opts = SearchOptions(
        response_transforms=responses(SEARCH["response"]),
        predictor_transforms=predictors(SEARCH["predictors"]),
        top=1,
    )
    north = split_groups(prep)["north"]
    body = select_group(GroupTask(north, opts, "test", trust=GroupTrust(True, False, 10)))
    trust = body.trust
    assert trust.stability.usable == 10 and trust.optimism is None
    # source: the simulation's construction: log-log is clearly right in this district
    assert trust.stability.share >= 0.8
    assert to_jsonable(trust)["resamples"] == 10
    assert isinstance(body.ranking[0], EntryReport)


def test_a_group_reached_after_the_deadline_gets_a_503_problem():
    import time

    prep = prepare({"columns": COLUMNS}, "repair_cost", ["pipe_length_m"], group_by="district")
    opts = SearchOptions(
        response_transforms=responses(SEARCH["response"]),
        predictor_transforms=predictors(SEARCH["predictors"]),
        top=1,
    )
    north = split_groups(prep)["north"]
    late = select_group(
        GroupTask(north, opts, "test", deadline=Deadline(time.monotonic() - 1.0, 60))
    )
    assert isinstance(late, GroupFailure)
    record = late.record  # a neutral record: the web layer or the command line renders it
    assert isinstance(record, ErrorRecord) and record.over_budget and "ran out" in record.detail
    assert "time limit of 60 s" in record.detail  # the caller's number, not what was left
    assert record_problem(record)["status"] == 503
    on_time = select_group(GroupTask(north, opts, "test", deadline=Deadline.after(600.0)))
    assert on_time.ranking[0].rank == 1
