"""The render package's entry point: one dispatcher on which the areas register, which
refuses what has no contract form."""

from dataclasses import dataclass

import pytest
from service.api import render
from service.api.render import registry
from service.selection.search import Band, BandReport


@dataclass(frozen=True)
class _Unregistered:
    value: float


def test_the_package_hands_out_the_registry_entry_point():
    assert render.contract is registry.contract
    assert render.renders is registry.renders


def test_the_areas_register_on_the_one_dispatcher_when_the_package_is_imported():
    report = BandReport.of(Band(2.0, 0.5, 2.5), 4, 0.05, frozenset({"normality"}))
    assert registry.renders(report)
    assert registry.contract.dispatch(BandReport) is not registry.contract.dispatch(object)
    assert registry.contract(report)["threshold"] == 2.5


@pytest.mark.parametrize("value", [1.0, 3, "text", None, {"a": 1}, [1, 2], _Unregistered(1.0)])
def test_plain_values_and_unregistered_types_do_not_render(value):
    assert not registry.renders(value)
    with pytest.raises(
        TypeError, match=f"no contract form is registered for {type(value).__name__}"
    ):
        registry.contract(value)
