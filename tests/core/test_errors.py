"""Errors the core raises on purpose (service/core/errors.py).

Reference: RFC 6901 (JSON Pointer) section 3 and its examples: "~" is written "~0" and "/" is
written "~1"; the pointer of the whole document is the empty string.
"""

from __future__ import annotations

import pytest
from service.core.errors import (
    BestscaleError,
    BudgetError,
    CandidateFailure,
    FieldProblem,
    InputError,
    ModelFailure,
    pointer,
)


@pytest.mark.parametrize(
    "parts, text",
    [
        ((), ""),  # source: RFC 6901 section 5, "" is the whole document
        (("foo", 0), "/foo/0"),  # source: RFC 6901 section 5, "/foo/0"
        (("a/b",), "/a~1b"),  # source: RFC 6901 section 5, "/a~1b"
        (("m~n",), "/m~0n"),  # source: RFC 6901 section 5, "/m~0n"
        (("~1",), "/~01"),  # "~" escaped first, so "~1" is not read back as "/"
        (("data", "columns", "pipe age (y)", 3), "/data/columns/pipe age (y)/3"),
    ],
)
def test_pointer_escapes_as_rfc_6901_says(parts, text):
    assert pointer(*parts) == text


def test_input_error_at_names_one_field():
    err = InputError.at("/predictors/2", "predictor column 'depth' is not in the data")
    assert err.problems == [FieldProblem("/predictors/2", err.detail)]
    assert str(err) == err.detail and isinstance(err, BestscaleError)


def test_each_class_has_its_own_kind_and_title():
    kinds = {cls.kind for cls in (InputError, BudgetError, ModelFailure)}
    titles = {cls.title for cls in (InputError, BudgetError, ModelFailure)}
    assert len(kinds) == 3 and len(titles) == 3 and BestscaleError.kind not in kinds
    assert ModelFailure("all failed").problems == []


def test_candidate_failure_is_not_a_caller_error():
    f = CandidateFailure("log needs positive values", {"column": "x"})
    assert not isinstance(f, BestscaleError)  # the search goes on; no problem document
    assert f.reason == "log needs positive values" and f.details == {"column": "x"}
