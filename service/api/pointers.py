"""Where a problem is, as a JSON Pointer (RFC 6901) into the request body of each endpoint.

The core and the selection layer name places in their own terms (the locations of
``service/core/errors.py``: a cell, a predictor, the response, an option, a field of the
specification under study or of a model artifact).  This module is the one place that knows
how each endpoint's request body spells them:

- ``selections`` (POST /v1/selections, /v1/reports, the command line and batch months): the
  columns are named by ``response`` and ``predictors``; the specification under study is
  the ``incumbent``.
- ``diagnostics`` (POST /v1/diagnostics): the columns are named inside ``specification``
  (``/specification/response/column``, ``/specification/predictors/1/column``), which is
  also the specification under study.
- ``predictions`` (POST /v1/predictions): the predictors are those of the model's
  specification (``/model/specification/predictors/1``), and the model's fields are under
  ``/model``.

Cells follow the table's layout: ``/data/columns/<column>/<row>`` and
``/data/records/<row>/<column>``; CSV text (sent in JSON or uploaded) has no pointer inside
it, so its cells point at ``/data/csv`` and the message names the data row, the line and
the column in words.  An uploaded Parquet file arrives as ``data.columns``.
"""

from __future__ import annotations

from dataclasses import dataclass

from ..core.errors import (
    Categorical,
    Cell,
    DataColumn,
    DataRow,
    FieldProblem,
    Location,
    ModelField,
    Option,
    Predictor,
    PredictorChoice,
    Predictors,
    Response,
    ResponseChoice,
    SpecField,
    Table,
)

SELECTIONS, DIAGNOSTICS, PREDICTIONS = "selections", "diagnostics", "predictions"
ENDPOINTS = (SELECTIONS, DIAGNOSTICS, PREDICTIONS)
_BY_PATH = {
    "/v1/selections": SELECTIONS,
    "/v1/reports": SELECTIONS,
    "/v1/diagnostics": DIAGNOSTICS,
    "/v1/predictions": PREDICTIONS,
}
#: where each endpoint's body holds the specification under study
_SPEC_AT: dict[str, tuple[str, ...]] = {
    SELECTIONS: ("incumbent",),
    DIAGNOSTICS: ("specification",),
    PREDICTIONS: ("model", "specification"),
}


@dataclass(frozen=True)
class RequestField(Location):
    """A place the web layer names itself, already as a JSON Pointer (limits, sizes)."""

    pointer: str


def pointer(*parts: object) -> str:
    """Build a JSON Pointer from path parts, escaping ``~`` and ``/`` (RFC 6901)."""
    out = []
    for part in parts:
        text = str(part).replace("~", "~0").replace("/", "~1")
        out.append(text)
    return "/" + "/".join(out) if out else ""


def endpoint_of(path: str) -> str:
    """The body a request path takes (``selections`` for any path not listed)."""
    return _BY_PATH.get(path.rstrip("/"), SELECTIONS)


def _table(layout: str, *inside: object) -> str:
    if layout == "csv":
        return "/data/csv"  # no pointer inside CSV text: the message says where in words
    if layout in ("columns", "records"):
        return pointer("data", layout, *inside)
    return "/data"


def pointer_of(where: Location, endpoint: str = SELECTIONS) -> str:
    """The JSON Pointer of ``where`` in the request body of ``endpoint``."""
    if isinstance(where, RequestField):
        return where.pointer
    if isinstance(where, Table):
        return _table(where.layout)
    if isinstance(where, Cell):
        if where.layout == "records":
            return _table("records", where.row, where.column)
        return _table(where.layout, where.column, where.row)
    if isinstance(where, DataColumn):
        if where.layout == "records":
            return _table("records", 0, where.column)
        return _table(where.layout, where.column)
    if isinstance(where, DataRow):
        return _table("records", where.row) if where.layout == "records" else _table(where.layout)
    if isinstance(where, Response):
        if endpoint == DIAGNOSTICS:
            return "/specification/response/column"
        if endpoint == PREDICTIONS:
            return "/model/specification/response/column"
        return "/response"
    if isinstance(where, Predictors):
        return (
            "/predictors" if endpoint == SELECTIONS else pointer(*_SPEC_AT[endpoint], "predictors")
        )
    if isinstance(where, Predictor):
        if endpoint == DIAGNOSTICS:
            return pointer("specification", "predictors", where.index, "column")
        if endpoint == PREDICTIONS:
            return pointer("model", "specification", "predictors", where.index)
        return pointer("predictors", where.index)
    if isinstance(where, Categorical):
        return pointer("categorical", where.index)
    if isinstance(where, Option):
        return pointer(*where.name.split("."))
    if isinstance(where, ResponseChoice):
        tail = () if where.index is None else (where.index,)
        return pointer("transforms", "response", *tail)
    if isinstance(where, PredictorChoice):
        parts = [p for p in (where.column, where.index) if p is not None]
        return pointer("transforms", "predictors", *parts)
    if isinstance(where, SpecField):
        part: tuple[object, ...] = (
            ("response",) if where.predictor is None else ("predictors", where.predictor)
        )
        return pointer(*_SPEC_AT[endpoint], *part, *where.path)
    if isinstance(where, ModelField):
        return pointer("model", *where.path)
    raise TypeError(f"no JSON Pointer for {where!r}")  # a new location kind needs a rule here


def error_items(
    problems: list[FieldProblem] | tuple[FieldProblem, ...], endpoint: str
) -> list[dict]:
    """``errors[]`` of a problem body: ``{pointer, detail}`` per problem, in order."""
    return [{"pointer": pointer_of(p.where, endpoint), "detail": p.detail} for p in problems]
