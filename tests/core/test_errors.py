"""Errors the core raises on purpose and the places they name (service/core/errors.py).

The core names places in domain terms; turning them into JSON Pointers is the web layer's
job (tests/api/test_pointers.py)."""

from __future__ import annotations

import pickle

import pytest
from service.core.errors import (
    BestscaleError,
    BudgetError,
    CandidateFailure,
    Cell,
    ErrorRecord,
    FieldProblem,
    InputError,
    ModelFailure,
    ModelField,
    Predictor,
    SpecField,
)


def test_input_error_at_names_one_place():
    err = InputError.at(Predictor(2), "predictor column 'depth' is not in the data")
    assert err.problems == [FieldProblem(Predictor(2), err.detail)]
    assert str(err) == err.detail and isinstance(err, BestscaleError)


def test_locations_are_values():
    # equal by content, hashable, immutable: a location can be compared, kept in a set,
    # and cannot be rewritten after it was raised
    assert Cell("cost", 3, "columns") == Cell("cost", 3, "columns")
    assert len({Predictor(1), Predictor(1), Predictor(2)}) == 2
    with pytest.raises(AttributeError):
        Predictor(1).index = 2  # type: ignore[misc]
    assert Cell("cost", 3, "columns") != Cell("cost", 3, "records")


def test_fields_extend_their_path():
    assert SpecField.response("transform") == SpecField(None, ("transform",))
    assert SpecField.of_predictor(1, "transform").at("lambda") == SpecField(
        1, ("transform", "lambda")
    )
    assert ModelField().at("cv_plus").at("fold_fits", 0) == ModelField(("cv_plus", "fold_fits", 0))


def test_each_class_has_its_own_kind_and_title():
    kinds = {cls.kind for cls in (InputError, BudgetError, ModelFailure)}
    titles = {cls.title for cls in (InputError, BudgetError, ModelFailure)}
    assert len(kinds) == 3 and len(titles) == 3 and BestscaleError.kind not in kinds
    assert ModelFailure("all failed").problems == []


def test_an_error_record_keeps_the_error_as_data_and_pickles():
    rec = ErrorRecord.of(InputError.at(Predictor(0), "constant"))
    assert (rec.kind, rec.title, rec.detail, rec.over_budget) == (
        "invalid-input",
        InputError.title,
        "constant",
        False,
    )
    assert rec.problems == (FieldProblem(Predictor(0), "constant"),)
    assert ErrorRecord.of(BudgetError("time ran out")).over_budget
    # it crosses process boundaries (worker pools, Dask) unchanged
    assert pickle.loads(pickle.dumps(rec)) == rec


def test_candidate_failure_is_not_a_caller_error():
    f = CandidateFailure("log needs positive values", {"column": "x"})
    assert not isinstance(f, BestscaleError)  # the search goes on; no problem document
    assert f.reason == "log needs positive values" and f.details == {"column": "x"}
