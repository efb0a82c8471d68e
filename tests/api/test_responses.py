"""Response models (service/api/responses.py): the documented layout of every answer.

References: the shipped example responses (openapi_examples/, produced by the service) must
fit their models, checked twice: by pydantic and, through each model's JSON Schema, by an
independent JSON Schema validator (jsonschema_rs, draft 2020-12).
"""

from __future__ import annotations

import json
from pathlib import Path

import jsonschema_rs
import pytest
from service.api import responses as rs

EXAMPLES = Path(__file__).resolve().parents[2] / "openapi_examples"
CASES = [
    ("selections.response.json", rs.SelectionResponse),
    ("predictions.response.json", rs.PredictionsResponse),
    ("diagnostics.response.json", rs.DiagnosticsResponse),
    ("transforms.response.json", rs.TransformsResponse),
]


@pytest.mark.parametrize(("name", "model"), CASES, ids=[c[0] for c in CASES])
def test_shipped_examples_fit_their_models(name, model):
    example = json.loads((EXAMPLES / name).read_text())
    model.model_validate(example)
    # source: jsonschema_rs (an independent JSON Schema implementation) on the model's schema
    validator = jsonschema_rs.Draft202012Validator(model.model_json_schema())
    errors = [e.message for e in validator.iter_errors(example)]
    assert not errors, errors[:3]


def test_the_models_catch_a_wrong_answer():
    example = json.loads((EXAMPLES / "selections.response.json").read_text())
    example["ranking"][0]["cv"]["value"] = "small"  # a number field holding text
    validator = jsonschema_rs.Draft202012Validator(rs.SelectionResponse.model_json_schema())
    assert not validator.is_valid(example)


def test_problem_model_has_the_rfc_9457_members():
    props = rs.Problem.model_json_schema()["properties"]
    # source: RFC 9457 section 3.1
    assert {"type", "title", "status", "detail"} <= set(props)


def test_the_conditions_model_lists_the_cores_conditions_in_order():
    from service.core.conditions import CONDITION_NAMES

    # the response model documents exactly what the core assesses (the contract's order)
    assert tuple(rs.ConditionsOut.model_fields) == CONDITION_NAMES
