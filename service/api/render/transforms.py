"""Contract form of the transform catalogue (GET /v1/transforms): one entry per family with
its parameters, domain, the places it may be named and how a coefficient on its scale
reads."""

from __future__ import annotations

from typing import Any

from ...core import transforms as tr
from ...core.transforms.family import Parameter, WhenOmitted
from .registry import contract


def when_omitted(w: WhenOmitted) -> dict[str, str]:
    places = {
        "response": w.response,
        "predictor": w.predictor,
        "predictor_search": w.predictor_search,
    }
    return {place: rule for place, rule in places.items() if rule is not None}


def parameter(p: Parameter) -> dict[str, Any]:
    out: dict[str, Any] = {"name": p.field, "type": p.kind}
    if p.bounds is not None:
        out |= {"minimum": p.bounds[0], "maximum": p.bounds[1]}
    if p.length is not None:
        out |= {"min_length": p.length[0], "max_length": p.length[1]}
    return out | {
        "default": p.default,
        "when_omitted": when_omitted(p.when_omitted),
        "example": p.example,
        "meaning": p.meaning,
    }


@contract.register
def family(f: tr.Family) -> dict[str, Any]:
    """A family's entry of the catalogue."""
    return {
        "name": f.name,
        "parameters": [parameter(p) for p in f.parameters],
        "domain": f.domain_statement,
        "applies_to": list(f.applies_to),
        "reading": f.reading,
    }


def catalogue() -> list[dict[str, Any]]:
    """Every family's entry, in the registry's order."""
    return [family(f) for f in tr.CATALOGUE]
