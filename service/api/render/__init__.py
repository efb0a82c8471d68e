"""Typed results -> contract JSON: the one place the response's field names are written.

The selection floor and the core return typed, frozen results (dataclasses named for what
they hold); each area of the response has one module here that turns its results into the
dicts of the HTTP contract.  :func:`contract` is the single entry point: every exit of the
service (the JSON responses, the report page, the command line, the batch files) reaches it
through :func:`service.api.encode.to_jsonable`, which renders any typed result it meets
wherever it sits in a body.

To move an area here: give its producer a frozen dataclass result, register a renderer for
it in the area's module below (``@contract.register``), have the readers in the lower floors
use attributes, and drop the area's files from the allowance list in
``tests/test_architecture.py`` (the shipped examples' responses must stay identical).
"""

from __future__ import annotations

from functools import singledispatch
from typing import Any


@singledispatch
def contract(result: Any) -> Any:
    """The contract JSON of ``result`` (a typed result of a lower floor)."""
    raise TypeError(f"no contract form is registered for {type(result).__name__}")


def renders(result: Any) -> bool:
    """Whether ``result`` is a typed result with a registered contract form."""
    return contract.dispatch(type(result)) is not contract.dispatch(object)


# the areas register their renderers on import
from . import (  # noqa: E402,F401
    conditions,
    cv,
    data,
    drift,
    entries,
    estimates,
    groups,
    incumbent,
    model,
    plots,
    predictions,
    search,
    selection,
    specs,
    transforms,
    trust,
)

__all__ = ["contract", "renders"]
