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


@dataclass(frozen=True)
class _RegisteredLate:
    value: float


def test_a_renderer_registered_after_a_question_is_seen_and_plain_types_still_do_not_render():
    """``renders`` keeps its answer per type; a registration made after the question (the
    dispatcher's registry grows) is seen at the next one, as the dispatcher itself sees it."""
    late = _RegisteredLate(2.0)
    assert not registry.renders(late)
    registry.contract.register(_RegisteredLate)(lambda r: {"value": r.value})
    assert registry.renders(late)
    assert registry.contract(late) == {"value": 2.0}
    # source: functools.singledispatch's own dispatch, asked directly
    for value in (1.0, {"a": 1}, [1], _Unregistered(1.0), late):
        expected = registry.contract.dispatch(type(value)) is not registry.contract.dispatch(object)
        assert registry.renders(value) is expected
