"""Problem details (service/api/errors.py).

References: RFC 9457 (members type, title, status, detail, instance; extension members
allowed); RFC 6901 JSON Pointers for the locations pydantic reports; pydantic's own
validation errors of the request model as the input.
"""

from __future__ import annotations

import json

import pytest
from pydantic import ValidationError
from service.api import errors
from service.api.schemas import SelectionRequest


def test_problem_body_has_the_rfc_9457_members():
    body = errors.problem_body(
        422,
        "invalid-input",
        "Invalid request content",
        "folds must be at least 2",
        [{"pointer": "/validation/folds", "detail": "must be at least 2"}],
        "rid-1",
        "/v1/x",
    )
    # source: RFC 9457 section 3.1 (type a URI reference, title, status, detail, instance)
    assert body["type"] == "urn:bestscale:problem:invalid-input"
    assert body["status"] == 422 and body["instance"] == "/v1/x" and body["request_id"] == "rid-1"
    assert body["errors"] == [{"pointer": "/validation/folds", "detail": "must be at least 2"}]
    assert json.loads(errors.problem_bytes(422, "k", "T", "d")) == {
        "type": "urn:bestscale:problem:k",
        "title": "T",
        "status": 422,
        "detail": "d",
        "errors": [],
    }


def test_long_details_are_clipped_and_long_lists_capped():
    many = [{"pointer": f"/p/{i}", "detail": "x"} for i in range(errors.MAX_ERRORS_LISTED + 7)]
    body = errors.problem_body(422, "k", "T", "d" * 10_000, many)
    assert len(body["detail"]) == errors.MAX_DETAIL_CHARS and body["detail"].endswith("…")
    assert len(body["errors"]) == errors.MAX_ERRORS_LISTED and body["errors_truncated"] == 7


def test_the_internal_error_says_nothing_but_the_request_id():
    body = json.loads(errors.internal_error_bytes("rid-9"))
    assert body["status"] == 500 and body["request_id"] == "rid-9"
    assert "Traceback" not in body["detail"] and body["errors"] == []


def _validation_errors(request: dict) -> list[tuple[str, str]]:
    with pytest.raises(ValidationError) as exc:
        SelectionRequest.model_validate(request)
    return [
        (errors._pointer_from_loc(e["loc"], request), errors._message(e))
        for e in exc.value.errors()
    ]


GOOD = {
    "data": {"columns": {"y": [1.0, 2.0], "a/b": [3.0, 4.0]}},
    "response": "y",
    "predictors": ["a/b"],
}


@pytest.mark.parametrize(
    "change, pointer, words",
    [
        ({"top": 0}, "/top", "must be at least 1, got 0"),
        ({"alpha": "low"}, "/alpha", "expected a number such as 0.05"),
        ({"validation": {"folds": 2.5}}, "/validation/folds", "expected a whole number"),
        ({"colour": "red"}, "/colour", "unknown field 'colour'"),
        ({"predictors": []}, "/predictors", "must hold at least 1 item"),
        ({"strategy": "fast"}, "/strategy", 'must be one of "auto", "exhaustive" or "screened"'),
    ],
)
def test_pydantic_locations_become_pointers_and_our_own_words(change, pointer, words):
    found = _validation_errors({**GOOD, **change})
    assert any(p == pointer and words in m for p, m in found), found


def test_a_missing_field_points_where_it_belongs_and_slashes_are_escaped():
    found = _validation_errors({k: v for k, v in GOOD.items() if k != "response"})
    assert ("/response", "field 'response' is required") in found
    # source: RFC 6901 section 3, "/" inside a name is written "~1"
    loc = ("body", "data", "columns", "a/b", 0)
    assert errors._pointer_from_loc(loc, {"data": {"columns": {"a/b": ["x"]}}}) == (
        "/data/columns/a~1b/0"
    )
