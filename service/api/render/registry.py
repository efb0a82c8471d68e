"""The single entry point of the render package: :func:`contract` (typed result -> contract
JSON), on which each area module registers its renderers, and :func:`renders`.

It lives in a module of its own so the area modules import it from here and the package's
``__init__`` imports the areas: imports point one way, with no cycle through the package.
"""

from __future__ import annotations

from functools import singledispatch
from typing import Any


@singledispatch
def contract(result: Any) -> Any:
    """The contract JSON of ``result`` (a typed result of a lower floor)."""
    raise TypeError(f"no contract form is registered for {type(result).__name__}")


def renders(result: Any) -> bool:
    """Whether ``result`` is a typed result with a registered contract form (the answer kept
    per type while the registrations stay as they are: a body asks for thousands of items)."""
    kind = type(result)
    if len(contract.registry) != _known[0]:  # a renderer registered since: ask again
        _answers.clear()
        _known[0] = len(contract.registry)
    got = _answers.get(kind)
    if got is None:
        got = _answers[kind] = contract.dispatch(kind) is not contract.dispatch(object)
    return got


_answers: dict[type, bool] = {}  # type -> whether it renders, for the registrations counted
_known = [0]  # how many registrations _answers was found with
