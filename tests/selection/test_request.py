"""One selection end to end from typed options (service/selection/request.py), no HTTP:
the rows, the search or one per group, trust, the group limit, the finishing touches.

References: the search's own ``search.select`` on the same rows (the use case adds nothing to
the ranking), RFC 2104 HMAC-SHA-256 via Python's ``hmac`` for the signature, the group
count read off the invented table, and Python's ``dataclasses`` for frozen options.
"""

from __future__ import annotations

import dataclasses
import hashlib
import hmac
import time

import numpy as np
import pytest
from service.api.encode import to_jsonable
from service.api.render.model import canonical_bytes
from service.core import transforms as tr
from service.core.errors import ErrorRecord, InputError, Option
from service.core.spec import PredictorSpec, Specification
from service.selection.deadline import Deadline
from service.selection.groups import GroupFailure
from service.selection.request import (
    SelectionJob,
    Service,
    TableColumns,
    TrustOptions,
    check_groups,
    finish_body,
    run_selection,
)
from service.selection.search import select
from service.selection.search_setup import SearchOptions

from tests.typed import predictors, responses

SERVICE = Service("test-version")


def _columns(n: int = 40, seed: int = 2) -> dict:
    """Invented: hours to resurface a road section by its length, traffic class and depot."""
    rng = np.random.default_rng(seed)
    length = rng.uniform(0.2, 3.0, n)
    traffic = rng.choice(["low", "high"], n)
    hours = np.exp(1.0 + 0.8 * np.log(length) + 0.2 * (traffic == "high") + rng.normal(0, 0.1, n))
    depot = np.array(["east", "west", "north"] * (n // 3 + 1))[:n]
    return {
        "hours": hours.tolist(),
        "length_km": length.tolist(),
        "traffic": traffic.tolist(),
        "depot": depot.tolist(),
    }


def _job(group_by: str | None = None, **search) -> SelectionJob:
    table = TableColumns(
        {"columns": _columns()},
        "hours",
        ("length_km", "traffic"),
        ("traffic",),
        group_by=group_by,
    )
    opts = SearchOptions(
        response_transforms=responses(["identity", "log"]),
        predictor_transforms=predictors(["identity", "log"]),
        folds=4,
        seed=3,
        top=2,
        **search,
    )
    return SelectionJob(table, opts, max_groups=3)


def test_the_ranking_is_the_search_s_own_with_version_and_cautions_added():
    job = _job()
    body = run_selection(job, SERVICE)
    # source: search.select on the same rows and options (the use case only finishes it)
    alone = select(job.table.prepare(), job.search, "test-version").body
    assert [e.specification for e in body.ranking] == [e.specification for e in alone.ranking]
    assert [e.cv.value for e in body.ranking] == [e.cv.value for e in alone.ranking]
    assert body.service_version == "test-version" and body.cautions
    assert alone.service_version is None and alone.cautions is None


def test_models_are_signed_with_the_service_s_key():
    key = b"k" * 32
    body = to_jsonable(run_selection(_job(), Service("v", ("current", {"current": key}))))
    model = body["ranking"][0]["model"]
    # source: RFC 2104 HMAC-SHA-256 computed with Python's hmac over key id, newline, body
    want = hmac.new(key, b"current\n" + canonical_bytes(model), hashlib.sha256).hexdigest()
    assert model["signature"] == {"algorithm": "HMAC-SHA-256", "key_id": "current", "value": want}
    assert len(body["ranking"]) > 1  # every listed model is marked, not only rank 1's
    assert all(e["model"]["signature"]["key_id"] == "current" for e in body["ranking"])
    unsigned = to_jsonable(run_selection(_job(), SERVICE))["ranking"][0]["model"]["signature"]
    assert unsigned["algorithm"] == "none"


def test_the_group_limit_accepts_the_limit_and_refuses_one_more():
    check_groups(3, "depot", 3)
    check_groups(10**6, "depot", None)  # no limit (a batch month)
    with pytest.raises(InputError) as exc:
        check_groups(4, "depot", 3)
    (problem,) = exc.value.problems
    assert problem.where == Option("group_by")
    assert "'depot' has 4 values" in problem.detail and "at most 3 groups" in problem.detail
    assert "BESTSCALE_MAX_GROUPS" in problem.detail and "split the job" in problem.detail


def test_a_grouped_job_runs_every_group_and_counts_them_against_the_limit():
    steps = []

    class Bar:
        total = 0

        def step(self) -> None:
            steps.append(self.total)

    body = run_selection(_job("depot"), SERVICE, progress=Bar())
    # source: the invented table has three depots
    assert sorted(body.groups) == ["east", "north", "west"] and steps == [3, 3, 3]
    assert all(g.service_version == "test-version" for g in body.groups.values())
    tight = dataclasses.replace(_job("depot"), max_groups=2)
    with pytest.raises(InputError) as exc:
        run_selection(tight, SERVICE)
    assert exc.value.problems[0].where == Option("group_by")


def test_trust_is_refused_for_a_grouped_job():
    job = dataclasses.replace(_job("depot"), trust=TrustOptions(stability=True))
    with pytest.raises(InputError) as exc:
        run_selection(job, SERVICE)
    assert exc.value.problems[0].where == Option("trust")


def test_trust_is_measured_on_one_table():
    job = dataclasses.replace(_job(), trust=TrustOptions(stability=True, resamples=3))
    trust = run_selection(job, SERVICE).trust
    assert trust.stability.requested == trust.stability.usable == 3
    assert 0.0 <= trust.stability.share <= 1.0


def test_a_past_deadline_fails_every_group_unless_each_group_has_its_own():
    expired = Deadline(time.monotonic() - 1.0, 5.0)
    job = _job("depot", deadline=expired, time_limit_s=5.0)
    shared = run_selection(job, SERVICE).groups
    assert all(isinstance(g, GroupFailure) for g in shared.values())
    assert all(isinstance(g.record, ErrorRecord) for g in shared.values())
    assert all(g.record.over_budget for g in shared.values())  # the caller renders them
    own = run_selection(job, SERVICE, per_group_time_limit=True).groups
    assert not any(isinstance(g, GroupFailure) for g in own.values())


def test_options_are_frozen():
    job = _job()
    for obj, name in ((job, "max_groups"), (job.table, "response"), (job.search, "folds")):
        with pytest.raises(dataclasses.FrozenInstanceError):
            setattr(obj, name, None)
    assert TrustOptions().wanted is False and TrustOptions(optimism=True).wanted is True


def test_finish_body_adds_cautions_for_transformed_responses_only():
    job = _job()
    body = select(job.table.prepare(), job.search, "test-version").body

    def listed(name: str):
        spec = Specification("y", tr.Transform(name), (PredictorSpec("x", tr.Transform("log")),))
        return dataclasses.replace(body.ranking[0], specification=spec)

    ident = dataclasses.replace(body, ranking=(listed("identity"),))
    logged = dataclasses.replace(body, ranking=(listed("log"),))
    plain = finish_body(ident, SearchOptions(), SERVICE).cautions
    more = finish_body(logged, SearchOptions(), SERVICE).cautions
    assert len(more) == len(plain) + 2 and not any("median" in c for c in plain)
