"""Contract form of a specification and of a transform, both ways.

A transform object is ``{"name": NAME, ...parameters, "estimated": true}``: its family's
typed :class:`~service.core.transforms.family.Parameter` entries say which field holds each
parameter, which values the object leaves out and which word leaves one to the data, so a
new family needs no edit here.  ``estimated`` appears when the service chose a parameter
from the data; reading an object back keeps it only for the families that keep it
(``Family.keeps_estimated``).  Reading (:func:`transform_of`, :func:`specification_of`)
takes objects the request schema or the model loader has already type-checked.
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from ...core import transforms as tr
from ...core.spec import PredictorSpec, Specification
from ...core.transforms.family import Parameter
from ..schemas import SpecificationIn
from .registry import contract


@contract.register
def transform(t: tr.Transform) -> dict[str, Any]:
    out: dict[str, Any] = {"name": t.name}
    for p in t.family.parameters:
        value = getattr(t, p.held_in)
        if p.written(value):
            out[p.field] = value
    if t.estimated:
        out["estimated"] = True
    return out


@contract.register
def specification(s: Specification) -> dict[str, Any]:
    return {
        "response": {"column": s.response, "transform": transform(s.response_transform)},
        "predictors": [
            {"column": p.column, "transform": transform(p.transform)} for p in s.predictors
        ],
        "intercept": s.intercept,
    }


@contract.register
def specification_as_sent(s: SpecificationIn) -> dict[str, Any]:
    """A request's own specification, shown back exactly as it was sent (a parameter read
    as another value, or a shift left to the data, keeps the sent form)."""
    return s.as_dict()


def _parameter(p: Parameter, value: Any) -> Any:
    if value is None or (p.open_word is not None and value == p.open_word):
        return None
    return value if p.kind == "string" else float(value)


def transform_of(d: Mapping[str, Any]) -> tr.Transform:
    """The transform of a type-checked transform object."""
    name = d["name"]
    family = tr.FAMILIES[name]
    values = {p.held_in: _parameter(p, d.get(p.field)) for p in family.parameters}
    estimated = family.keeps_estimated and bool(d.get("estimated", False))
    return tr.Transform(name, estimated=estimated, **values)


def _transform_in(part: Mapping[str, Any]) -> tr.Transform:
    """The transform of a specification's response or predictor object (identity when it
    names none)."""
    sent = part.get("transform")
    return transform_of(sent) if sent else tr.Transform("identity")


def specification_of(d: Mapping[str, Any]) -> Specification:
    """The specification of a type-checked specification object."""
    return Specification(
        d["response"]["column"],
        _transform_in(d["response"]),
        tuple(PredictorSpec(p["column"], _transform_in(p)) for p in d["predictors"]),
        bool(d.get("intercept", True)),
    )
