"""One list of families: the registry, the catalogue (GET /v1/transforms), the request
schema's enum and the model loader agree."""

from __future__ import annotations

import json
import typing
from pathlib import Path

import pytest
from service.api.render.transforms import catalogue
from service.api.schemas import TransformIn, TransformName
from service.core.transforms import (
    ALL_NAMES,
    FAMILIES,
    LAMBDA_NAMES,
    NUMERIC_NAMES,
    Transform,
    read_back,
    written_alike,
)
from service.core.transforms.registry import families_with_parameter, family_of

EXAMPLES = Path(__file__).resolve().parents[3] / "openapi_examples"


def test_registry_catalogue_and_schema_name_the_same_families_in_one_order():
    assert list(FAMILIES) == list(ALL_NAMES)
    assert [e["name"] for e in catalogue()] == list(ALL_NAMES)
    assert list(typing.get_args(TransformName)) == list(ALL_NAMES)
    enum = TransformIn.model_json_schema()["properties"]["name"]["enum"]
    assert enum == list(ALL_NAMES)
    assert tuple(n for n in ALL_NAMES if n != "categorical") == NUMERIC_NAMES
    assert LAMBDA_NAMES == ("box_cox", "yeo_johnson")


def test_the_shipped_catalogue_example_is_the_registrys():
    shipped = json.loads((EXAMPLES / "transforms.response.json").read_text())
    assert shipped["transforms"] == catalogue()


@pytest.mark.parametrize("name", ALL_NAMES)
def test_each_catalogued_parameter_is_held_by_the_transform(name):
    entry = next(e for e in catalogue() if e["name"] == name)
    family = FAMILIES[name]
    assert [p["name"] for p in entry["parameters"]] == [p.field for p in family.parameters]
    for p in family.parameters:
        value = "b" if p.kind == "string" else p.example
        t = Transform(name, **{p.held_in: value})
        # the example is held where the family says, written in the object form, and reads
        # back as the same transform
        assert getattr(t, p.held_in) == value and p.written(value)
        assert written_alike(t) == t and read_back(t) == t
    # every place the catalogue names has a rule for each parameter it leaves out
    for p in entry["parameters"]:
        assert set(p["when_omitted"]) <= {"response", "predictor", "predictor_search"}
        assert set(entry["applies_to"]) <= set(p["when_omitted"]) | {"predictor_search"}


def test_an_unknown_name_is_refused_where_the_value_is_built():
    with pytest.raises(ValueError, match="no transform family is called 'cube'"):
        Transform("cube")
    with pytest.raises(ValueError, match="no transform family is called 'cube'"):
        family_of("cube")


def test_families_with_parameter_follow_the_catalogue():
    # the catalogue (GET /v1/transforms) lists each family's parameters: the owners of a
    # parameter are exactly the families listing it
    for pname in ("exponent", "shift", "lambda", "reference"):
        listed = tuple(
            e["name"] for e in catalogue() if any(p["name"] == pname for p in e["parameters"])
        )
        assert families_with_parameter(pname) == listed
    assert families_with_parameter("lambda") == ("box_cox", "yeo_johnson")
