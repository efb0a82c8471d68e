"""Typed specifications, transforms and search choices for tests, read from (and written in)
their JSON object form by the web layer's own functions, as a request or an artifact is."""

from __future__ import annotations

from typing import Any

from service.api.options import predictor_choices, response_choices, sent_specification
from service.api.render.specs import specification, specification_of, transform, transform_of
from service.api.schemas import SpecificationIn, TransformsIn
from service.core import transforms as tr
from service.core.spec import Specification
from service.selection.search_setup import PredictorChoices, SentSpecification, TransformChoice


def spec_of(d: dict[str, Any]) -> Specification:
    """The specification of an object form (identity where it names no transform)."""
    return specification_of(d)


def spec_dict(s: Specification) -> dict[str, Any]:
    """The object form of a specification."""
    return specification(s)


def transform_dict(t: tr.Transform) -> dict[str, Any]:
    """The object form of a transform."""
    return transform(t)


def tf(d: str | dict[str, Any]) -> tr.Transform:
    """The transform a name or an object form stands for."""
    return transform_of({"name": d} if isinstance(d, str) else d)


def sent(d: dict[str, Any]) -> SentSpecification:
    """A specification as a request sends it (checked by the request schema)."""
    return sent_specification(SpecificationIn.model_validate(d))


def responses(items: list[Any]) -> tuple[TransformChoice, ...]:
    """``transforms.response`` of a request, typed (names or transform objects)."""
    got = response_choices(TransformsIn.model_validate({"response": items}).response)
    assert got is not None
    return got


def predictors(items: list[Any] | dict[str, list[Any]]) -> PredictorChoices:
    """``transforms.predictors`` of a request, typed: one list for all, or a list per column."""
    got = predictor_choices(TransformsIn.model_validate({"predictors": items}).predictors)
    assert got is not None
    return got
