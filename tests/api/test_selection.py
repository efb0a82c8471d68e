"""One selection request end to end (service/api/selection.py): request -> options, limits,
the body, and the same answer in-process as over HTTP.

References: the HTTP response of POST /v1/selections for the same request (Starlette's test
client), field for field apart from the elapsed time; the service settings for the limits.
"""

from __future__ import annotations

import time

import numpy as np
import pytest
from fastapi.testclient import TestClient
from service.api.encode import to_jsonable
from service.api.pointers import pointer_of
from service.api.schemas import SelectionRequest
from service.api.selection import finish_body, run_selection_request, selection_options
from service.app import app
from service.core.errors import InputError
from service.settings import get_settings


def _request(**over) -> dict:
    """Invented: hours to resurface a road section by its length and traffic class."""
    rng = np.random.default_rng(2)
    n = 40
    length = rng.uniform(0.2, 3.0, n)
    traffic = rng.choice(["low", "high"], n)
    hours = np.exp(1.0 + 0.8 * np.log(length) + 0.2 * (traffic == "high") + rng.normal(0, 0.1, n))
    req = {
        "data": {
            "columns": {
                "hours": hours.tolist(),
                "length_km": length.tolist(),
                "traffic": traffic.tolist(),
            }
        },
        "response": "hours",
        "predictors": ["length_km", "traffic"],
        "categorical": ["traffic"],
        "transforms": {"response": ["identity", "log"], "predictors": ["identity", "log"]},
        "validation": {"folds": 4, "seed": 3},
        "top": 2,
    }
    return {**req, **over}


def test_options_carry_the_request_and_one_deadline():
    req = SelectionRequest.model_validate(_request(alpha=0.01, limits={"time_limit_s": 20}))
    before = time.monotonic()
    opts = selection_options(req)
    assert (opts.folds, opts.seed, opts.alpha, opts.top) == (4, 3, 0.01, 2)
    assert opts.response_transforms == ["identity", "log"] and opts.time_limit_s == 20
    assert opts.deadline is not None and opts.deadline.limit_s == 20
    assert before + 20 <= opts.deadline.at <= time.monotonic() + 20
    assert opts.clock() is opts.deadline  # every part of the request asks the same clock


def test_limits_past_the_settings_point_at_the_field():
    s = get_settings()
    req = SelectionRequest.model_validate(_request(limits={"max_candidates": s.max_candidates + 1}))
    with pytest.raises(InputError) as exc:
        selection_options(req)
    assert pointer_of(exc.value.problems[0].where) == "/limits/max_candidates"
    bad = SelectionRequest.model_validate(_request(transforms={"predictors": {"depth": ["log"]}}))
    with pytest.raises(InputError) as exc:
        run_selection_request(bad)
    assert pointer_of(exc.value.problems[0].where) == "/transforms/predictors/depth"


def test_in_process_answer_equals_the_http_answer():
    req = _request()
    body = to_jsonable(run_selection_request(SelectionRequest.model_validate(req)))
    with TestClient(app) as c:
        http = c.post("/v1/selections", json=req).json()
    # source: the HTTP response for the same request (elapsed time aside)
    for b in (body, http):
        b["search"].pop("elapsed_s", None)
    assert body == http
    assert body["cautions"] and body["service_version"]


def test_finish_body_adds_cautions_for_transformed_responses_only():
    from service.selection.search_setup import SearchOptions

    ident = {"ranking": [{"specification": {"response": {"transform": {"name": "identity"}}}}]}
    logged = {"ranking": [{"specification": {"response": {"transform": {"name": "log"}}}}]}
    plain = finish_body(ident, SearchOptions())["cautions"]
    more = finish_body(logged, SearchOptions())["cautions"]
    assert len(more) == len(plain) + 2 and not any("median" in c for c in plain)
