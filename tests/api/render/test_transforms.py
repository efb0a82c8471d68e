"""Contract form of the transform catalogue (service/api/render/transforms.py): each family's
entry as GET /v1/transforms writes it, from the typed parameters the families declare.

References: the shipped example response (openapi_examples/transforms.response.json); the
bounds a request may send (service/core/transforms/bounds.py), which the catalogue states.
"""

from __future__ import annotations

import json
from pathlib import Path

from service.api.encode import to_jsonable
from service.api.render import contract
from service.api.render.transforms import catalogue, parameter, when_omitted
from service.core import transforms as tr
from service.core.transforms.family import Parameter, WhenOmitted

EXAMPLE = Path(__file__).resolve().parents[3] / "openapi_examples" / "transforms.response.json"


def test_the_catalogue_is_the_shipped_example_key_for_key():
    shipped = json.loads(EXAMPLE.read_text())["transforms"]
    # source: the shipped example response, compared as text so the key order counts too
    assert json.dumps(catalogue()) == json.dumps(shipped)
    assert [contract(f) for f in tr.CATALOGUE] == catalogue()
    assert to_jsonable({"transforms": list(tr.CATALOGUE)}) == {"transforms": catalogue()}


def test_a_numeric_parameter_states_its_bounds_and_a_text_parameter_its_length():
    when = WhenOmitted("required", None, "estimated")
    numeric = Parameter("q", "number", when, 0.5, "m", bounds=(-3.0, 3.0))
    assert parameter(numeric) == {
        "name": "q",
        "type": "number",
        "minimum": -3.0,
        "maximum": 3.0,
        "default": None,
        "when_omitted": {"response": "required", "predictor_search": "estimated"},
        "example": 0.5,
        "meaning": "m",
    }
    text = Parameter("r", "string", WhenOmitted(None, "default"), None, "m", length=(1, 9))
    assert list(parameter(text)) == [
        "name",
        "type",
        "min_length",
        "max_length",
        "default",
        "when_omitted",
        "example",
        "meaning",
    ]
    assert when_omitted(WhenOmitted()) == {}


def test_the_stated_bounds_are_the_ones_requests_are_held_to():
    entries = {e["name"]: e for e in catalogue()}
    (lam,) = entries["box_cox"]["parameters"]
    # source: service/core/transforms/bounds.py, the bounds the request schema uses
    assert (lam["minimum"], lam["maximum"]) == (-tr.LAMBDA_BOUND, tr.LAMBDA_BOUND)
    (q,) = entries["power"]["parameters"]
    assert (q["minimum"], q["maximum"]) == (-tr.EXPONENT_BOUND, tr.EXPONENT_BOUND)
    (ref,) = entries["categorical"]["parameters"]
    assert ref["max_length"] == tr.REFERENCE_MAX_CHARS
    assert entries["categorical"]["applies_to"] == ["predictor"]
