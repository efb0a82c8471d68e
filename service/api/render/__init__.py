"""Typed results -> contract JSON: the one place the response's field names are written.

The selection floor and the core return typed, frozen results (dataclasses named for what
they hold); each area of the response has one module here that turns its results into the
dicts of the HTTP contract.  :func:`contract` is the single entry point: every exit of the
service (the JSON responses, the report page, the command line, the batch files) reaches it
through :func:`service.api.encode.to_jsonable`, which renders any typed result it meets
wherever it sits in a body.

To move an area here: give its producer a frozen dataclass result, register a renderer for
it in the area's module below (``@contract.register``, with ``contract`` imported from
:mod:`.registry`), have the readers in the lower floors use attributes, and drop the area's
files from the allowance list in ``tests/test_architecture.py`` (the shipped examples'
responses must stay identical).
"""

from __future__ import annotations

# the areas register their renderers on :func:`contract` when imported
from . import (  # noqa: F401
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
    transforms,
    trust,
)
from .registry import contract, renders

__all__ = ["contract", "renders"]
