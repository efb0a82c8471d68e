"""Object form of a specification and of a transform, written and read back
(service/api/render/specs.py), checked against the shipped examples and the families' typed
parameters."""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest
from service.api.encode import to_jsonable
from service.api.render import contract, renders
from service.api.render.specs import specification, specification_of, transform, transform_of
from service.api.schemas import SpecificationIn
from service.core import boxtidwell as bt
from service.core import transforms as tr
from service.core.spec import PredictorSpec, Specification

EXAMPLES = Path(__file__).resolve().parents[3] / "openapi_examples"

#: transforms of every family, with and without their parameters and estimated marks
TRANSFORMS = [
    tr.Transform("identity"),
    tr.Transform("log"),
    tr.Transform("log", shift=0.0),
    tr.Transform("log", shift=0.2, estimated=True),
    tr.Transform("log", shift=-1.5),
    tr.Transform("sqrt"),
    tr.Transform("reciprocal"),
    tr.Transform("square"),
    tr.Transform("power", exponent=0.25),
    tr.Transform("power", exponent=-0.5, estimated=True),
    bt.ESTIMATED,
    tr.Transform("box_cox"),
    tr.Transform("box_cox", lam=0.25),
    tr.Transform("box_cox", lam=-0.0050614, estimated=True),
    tr.Transform("yeo_johnson", lam=1.5),
    tr.Transform("yeo_johnson", lam=2.0, estimated=True),
    tr.Transform("categorical"),
    tr.Transform("categorical", reference="loam"),
]


def _example_specifications():
    """Every specification object of the shipped examples (requests and responses)."""
    found = []

    def walk(o):
        if isinstance(o, dict):
            if set(o) >= {"response", "predictors", "intercept"} and isinstance(
                o["response"], dict
            ):
                found.append(o)
            for v in o.values():
                walk(v)
        elif isinstance(o, list):
            for v in o:
                walk(v)

    for p in sorted(EXAMPLES.glob("*.json")):
        walk(json.loads(p.read_text()))
    return found


def test_transform_objects_are_written_as_the_examples_show_them():
    # source: openapi_examples/selections.response.json, search.predictor_transforms (the
    # estimated power is listed with an open exponent) and its ranking's specifications
    assert transform(bt.ESTIMATED) == {"name": "power", "exponent": None, "estimated": True}
    assert transform(tr.Transform("identity")) == {"name": "identity"}
    assert transform(tr.Transform("log", shift=0.2, estimated=True)) == {
        "name": "log",
        "shift": 0.2,
        "estimated": True,
    }
    # a zero shift and an unset one are both a plain log
    assert transform(tr.Transform("log", shift=0.0)) == {"name": "log"}
    assert transform(tr.Transform("log")) == {"name": "log"}
    assert transform(tr.Transform("box_cox", lam=0.25)) == {"name": "box_cox", "lambda": 0.25}
    assert transform(tr.Transform("box_cox")) == {"name": "box_cox"}
    assert transform(tr.Transform("categorical", reference="loam")) == {
        "name": "categorical",
        "reference": "loam",
    }


def test_the_shipped_examples_specifications_read_back_and_are_written_alike():
    specs = _example_specifications()
    assert len(specs) >= 3  # the request's and the responses' specifications
    marks = 0
    for d in specs:
        # source: the shipped examples (openapi_examples/*.json), written by the service
        typed = specification_of(d)
        assert isinstance(typed, Specification)
        want = json.loads(json.dumps(d))
        for part in [want["response"], *want["predictors"]]:
            t = part["transform"]
            mark = t.pop("estimated", False)
            if mark and tr.FAMILIES[t["name"]].keeps_estimated:
                t["estimated"] = True
            elif mark:
                marks += 1  # a fitted power reads back its exponent, without the mark
        assert specification(typed) == want
    assert marks >= 1


@pytest.mark.parametrize("t", TRANSFORMS, ids=lambda t: repr(t))
def test_a_transform_reads_back_as_the_core_says(t):
    back = transform_of(transform(t))
    assert back == tr.read_back(t) and hash(back) == hash(tr.read_back(t))
    assert transform(t) == transform(tr.written_alike(t))


@pytest.mark.parametrize("a", TRANSFORMS, ids=lambda t: repr(t))
def test_written_alike_is_equal_object_forms(a):
    for b in TRANSFORMS:
        assert (transform(a) == transform(b)) == (tr.written_alike(a) == tr.written_alike(b))


@pytest.mark.parametrize("family", tr.CATALOGUE, ids=lambda f: f.name)
def test_every_catalogued_parameter_is_written_and_read_by_its_field(family):
    for p in family.parameters:
        value = "b" if p.kind == "string" else p.example
        t = transform_of({"name": family.name, p.field: value})
        assert getattr(t, p.held_in) == value
        assert transform(t) == {"name": family.name, p.field: value}


def test_values_read_from_objects_hash_and_compare_as_built_ones():
    # keys of the search (scale keys, candidate keys) hold these values: an object read
    # back must be the same key as the transform built in the core
    pairs = [
        ({"name": "box_cox", "lambda": 0.25}, tr.Transform("box_cox", lam=0.25)),
        ({"name": "box_cox", "lambda": 0.0004}, tr.Transform("box_cox", lam=0.0)),
        ({"name": "yeo_johnson", "lambda": 1.9995}, tr.Transform("yeo_johnson", lam=2.0)),
        ({"name": "power", "exponent": 2}, tr.Transform("power", exponent=2.0)),
        ({"name": "log", "shift": 1}, tr.Transform("log", shift=1.0)),
        ({"name": "log", "shift": "auto"}, tr.Transform("log")),
        (
            {"name": "log", "shift": 0.5, "estimated": True},
            tr.Transform("log", shift=0.5, estimated=True),
        ),
    ]
    keys = {}
    for sent, built in pairs:
        got = transform_of(sent)
        assert got == built and hash(got) == hash(built)
        assert all(
            isinstance(v, float) for v in (got.lam, got.exponent, got.shift) if v is not None
        )
        keys[("x", got)] = sent
    assert all(keys[("x", built)] is sent for sent, built in pairs)
    # a power read back keeps its exponent only; a lambda keeps its estimated mark
    assert transform_of({"name": "power", "exponent": 0.5, "estimated": True}) == tr.Transform(
        "power", exponent=0.5
    )
    fitted = transform_of({"name": "box_cox", "lambda": 0.3, "estimated": True})
    assert fitted.estimated and fitted.n_estimated == 1
    assert math.copysign(1.0, transform_of({"name": "box_cox", "lambda": -0.0}).lam) == -1.0


def test_an_omitted_transform_is_the_identity_and_the_intercept_defaults_to_true():
    bare = specification_of({"response": {"column": "y"}, "predictors": [{"column": "x"}]})
    assert bare == Specification(
        "y", tr.Transform("identity"), (PredictorSpec("x", tr.Transform("identity")),), True
    )


def test_typed_values_render_wherever_they_sit_in_a_body():
    spec = Specification(
        "cost",
        tr.Transform("box_cox", lam=0.25),
        (PredictorSpec("length", tr.Transform("log", shift=0.0)),),
        False,
    )
    assert renders(spec) and renders(spec.response_transform)
    body = to_jsonable({"chosen": [spec], "scale": spec.response_transform})
    assert body == {
        "chosen": [
            {
                "response": {"column": "cost", "transform": {"name": "box_cox", "lambda": 0.25}},
                "predictors": [{"column": "length", "transform": {"name": "log"}}],
                "intercept": False,
            }
        ],
        "scale": {"name": "box_cox", "lambda": 0.25},
    }
    assert contract(spec) == body["chosen"][0]


def test_a_request_s_own_specification_is_shown_back_as_sent():
    sent = {
        "response": {"column": "cost", "transform": {"name": "box_cox", "lambda": 0.0005}},
        "predictors": [
            {"column": "length", "transform": {"name": "log", "shift": "auto"}},
            {"column": "age", "transform": {"name": "log", "shift": 0}},
        ],
        "intercept": True,
    }
    model = SpecificationIn.model_validate(sent)
    assert to_jsonable(model) == sent
    # the typed value reads the limits and the shift left to the data as the core does
    typed = specification_of(model.as_dict())
    assert typed.response_transform == tr.Transform("box_cox", lam=0.0)
    assert typed.predictors[0].transform == tr.Transform("log")
