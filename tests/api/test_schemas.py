"""Request models (service/api/schemas.py): what a request may say.

References: the shipped example requests (openapi_examples/) must validate; RFC 8259 numbers
(NaN and Infinity are not JSON); the HTTP contract's rules: exactly one data layout, no
unknown field, a predictor power with an exponent, a Box-Cox lambda optional.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from pydantic import ValidationError
from service.api.schemas import SelectionRequest, SpecificationIn, TransformIn

EXAMPLES = Path(__file__).resolve().parents[2] / "openapi_examples"
BASE = {
    "data": {"columns": {"y": [1.0, 2.0], "x": [3.0, 4.0]}},
    "response": "y",
    "predictors": ["x"],
}


def test_the_shipped_selection_example_validates():
    req = json.loads((EXAMPLES / "selections.request.json").read_text())
    model = SelectionRequest.model_validate(req)
    assert model.response == req["response"]


@pytest.mark.parametrize(
    "data",
    [
        {},
        {"columns": {"y": [1.0]}, "csv": "y\n1\n"},  # two layouts
    ],
)
def test_data_needs_exactly_one_layout(data):
    with pytest.raises(ValidationError):
        SelectionRequest.model_validate({**BASE, "data": data})


def test_defaults_and_strictness():
    req = SelectionRequest.model_validate(BASE)
    assert req.top == 5 and req.intercept is True and req.strategy == "auto"
    with pytest.raises(ValidationError):
        SelectionRequest.model_validate({**BASE, "unknown": 1})
    with pytest.raises(ValidationError):
        SelectionRequest.model_validate({**BASE, "alpha": float("nan")})


def test_transform_parameters():
    t = TransformIn.model_validate({"name": "box_cox", "lambda": 0.5})
    assert t.as_dict() == {"name": "box_cox", "lambda": 0.5}
    assert TransformIn.model_validate({"name": "box_cox"}).as_dict() == {"name": "box_cox"}
    with pytest.raises(ValidationError):
        TransformIn.model_validate({"name": "cube_root"})
    with pytest.raises(ValidationError):  # a power in a specification needs its exponent
        SpecificationIn.model_validate(
            {
                "response": {"column": "y"},
                "predictors": [{"column": "x", "transform": {"name": "power"}}],
            }
        )
    spec = SpecificationIn.model_validate(
        {
            "response": {"column": "y"},
            "predictors": [{"column": "x", "transform": {"name": "power", "exponent": 0.5}}],
        }
    )
    assert spec.as_dict()["predictors"][0]["transform"] == {"name": "power", "exponent": 0.5}


@pytest.mark.parametrize(
    "sent, message",
    [
        # the refusals as worded before the owners came from the family registry
        ({"name": "log", "exponent": 2.0}, "'exponent' applies only to power, not log"),
        ({"name": "sqrt", "shift": 1.0}, "'shift' applies only to log, not sqrt"),
        (
            {"name": "power", "exponent": 2.0, "lambda": 0.5},
            "'lambda' applies only to box_cox and yeo_johnson, not power",
        ),
        (
            {"name": "identity", "reference": "a"},
            "'reference' applies only to categorical, not identity",
        ),
    ],
)
def test_a_parameter_on_a_family_that_does_not_take_it_is_refused_by_name(sent, message):
    with pytest.raises(ValidationError, match=message):
        TransformIn.model_validate(sent)


def test_each_family_accepts_its_own_parameters():
    for sent in (
        {"name": "power", "exponent": -0.5},
        {"name": "log", "shift": 1.0},
        {"name": "box_cox", "lambda": 0.5},
        {"name": "yeo_johnson", "lambda": 0.5},
        {"name": "categorical", "reference": "a"},
    ):
        assert TransformIn.model_validate(sent).as_dict() == sent
