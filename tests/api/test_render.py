"""The render package: one entry point for the contract form of typed results, reached by
every exit through the JSON encoder."""

from dataclasses import dataclass

import pytest
from service.api import render
from service.api.encode import to_jsonable
from service.selection.search import Band, BandReport


@dataclass(frozen=True)
class _Unregistered:
    value: float


def test_a_registered_result_renders_wherever_it_sits_in_a_body():
    report = BandReport.of(Band(2.0, 0.5, 2.5), 4, 0.05, frozenset({"normality"}))
    assert render.renders(report)
    body = {"search": {"band": report}, "list": [report]}
    out = to_jsonable(body)
    assert out["search"]["band"] == render.contract(report)
    assert out["list"] == [render.contract(report)]
    assert out["search"]["band"]["threshold"] == 2.5


def test_a_typed_result_without_a_contract_form_is_refused_not_serialised():
    # orjson would write a dataclass's own field names: a typed result must be rendered
    assert not render.renders(_Unregistered(1.0))
    with pytest.raises(TypeError, match="no contract form"):
        to_jsonable({"x": _Unregistered(1.0)})
    with pytest.raises(TypeError, match="no contract form"):
        render.contract(_Unregistered(1.0))
