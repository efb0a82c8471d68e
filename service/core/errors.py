"""Domain errors raised by the numerical core, and where in a request they are.

The core names the place of a problem in its own terms -- a cell of the table, a predictor
by position, the response, an option by name, a transform the caller asked for, a field of
the specification under study or of a model artifact -- with the small vocabulary of
:class:`Location` below.  It never builds a JSON Pointer and never speaks HTTP: the web
layer (``service/api/pointers.py``) turns each location into the JSON Pointer (RFC 6901) of
the endpoint's request body, and ``service/api/errors.py`` builds the RFC 9457 problem.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

# ------------------------------------------------------------------ locations


@dataclass(frozen=True)
class Location:
    """Where a problem is, in the request's own terms (base class of the vocabulary)."""


@dataclass(frozen=True)
class Table(Location):
    """The table as a whole; ``layout`` ("columns", "records", "csv") when the problem is
    the way it was sent, "" when it is the rows themselves."""

    layout: str = ""


@dataclass(frozen=True)
class DataColumn(Location):
    """One column of the table as sent in ``layout``."""

    column: str
    layout: str


@dataclass(frozen=True)
class DataRow(Location):
    """One row of the table (0-based position in the request's data) as sent in ``layout``."""

    row: int
    layout: str


@dataclass(frozen=True)
class Cell(Location):
    """One cell: ``column`` at ``row`` (0-based position in the request's data)."""

    column: str
    row: int
    layout: str


@dataclass(frozen=True)
class Response(Location):
    """The column named as the response."""


@dataclass(frozen=True)
class Predictors(Location):
    """The list of predictor columns."""


@dataclass(frozen=True)
class Predictor(Location):
    """The predictor at ``index`` of the request's list."""

    index: int


@dataclass(frozen=True)
class Categorical(Location):
    """The entry at ``index`` of the list of columns to treat as categorical."""

    index: int


@dataclass(frozen=True)
class Option(Location):
    """An option by its dotted name, as messages and documents write it
    (``"order"``, ``"validation.metric"``, ``"trust.resamples"``, ``"interval"``)."""

    name: str


@dataclass(frozen=True)
class ResponseChoice(Location):
    """The response transforms a search may use; ``index`` one of them."""

    index: int | None = None


@dataclass(frozen=True)
class PredictorChoice(Location):
    """The predictor transforms a search may use: those of ``column`` (None: the list
    shared by every predictor); ``index`` one of them."""

    column: str | None = None
    index: int | None = None


@dataclass(frozen=True)
class SpecField(Location):
    """A field of the specification under study (the one a diagnosis is asked for, the
    incumbent of a selection): of the response (``predictor`` None) or of the predictor at
    position ``predictor``; ``path`` names the field inside it (``("transform", "lambda")``)."""

    predictor: int | None
    path: tuple[str, ...] = ()

    @classmethod
    def response(cls, *path: str) -> SpecField:
        return cls(None, path)

    @classmethod
    def of_predictor(cls, index: int, *path: str) -> SpecField:
        return cls(index, path)

    def at(self, *more: str) -> SpecField:
        return SpecField(self.predictor, (*self.path, *more))


@dataclass(frozen=True)
class ModelField(Location):
    """A field of a model artifact the service issued, by its path of keys and positions
    (``()`` is the artifact itself)."""

    path: tuple[str | int, ...] = ()

    def at(self, *more: str | int) -> ModelField:
        return ModelField((*self.path, *more))


# ------------------------------------------------------------------ errors


@dataclass(frozen=True)
class FieldProblem:
    where: Location
    detail: str


class BestscaleError(Exception):
    """Base class of every error the core raises on purpose."""

    title = "Bestscale error"
    kind = "error"

    def __init__(self, detail: str, problems: list[FieldProblem] | None = None):
        super().__init__(detail)
        self.detail = detail
        self.problems = problems or []


class InputError(BestscaleError):
    """The request is well-formed JSON but its content cannot be used (HTTP 422)."""

    title = "Invalid request content"
    kind = "invalid-input"

    @classmethod
    def at(cls, where: Location, detail: str) -> InputError:
        return cls(detail, [FieldProblem(where, detail)])


class BudgetError(BestscaleError):
    """The search could not finish any candidate inside its budget (HTTP 503)."""

    title = "Search budget exhausted"
    kind = "over-budget"


class ModelFailure(BestscaleError):
    """Every candidate failed to fit; the reasons are listed (HTTP 422)."""

    title = "No candidate could be fitted"
    kind = "no-candidate"


@dataclass(frozen=True)
class ErrorRecord:
    """An error the core raised on purpose, kept as data: what a group or a batch segment
    answers instead of a body (it crosses process boundaries; the web layer or the command
    line renders it)."""

    kind: str
    title: str
    detail: str
    problems: tuple[FieldProblem, ...] = ()
    over_budget: bool = False

    @classmethod
    def of(cls, exc: BestscaleError) -> ErrorRecord:
        return cls(
            exc.kind, exc.title, exc.detail, tuple(exc.problems), isinstance(exc, BudgetError)
        )


@dataclass
class CandidateFailure(Exception):
    """One candidate (or one fold of it) cannot be scored; the search goes on."""

    reason: str
    details: dict[str, Any] = field(default_factory=dict)

    def __str__(self) -> str:  # pragma: no cover - trivial
        return self.reason
