"""Domain errors raised by the numerical core.

The web layer maps each class to one RFC 9457 problem type; the core never
imports anything web-related.  Every error carries JSON Pointers (RFC 6901)
into the caller's request so a client can show which field is wrong.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any


def pointer(*parts: object) -> str:
    """Build a JSON Pointer from path parts, escaping ``~`` and ``/`` (RFC 6901)."""
    out = []
    for part in parts:
        text = str(part).replace("~", "~0").replace("/", "~1")
        out.append(text)
    return "/" + "/".join(out) if out else ""


@dataclass
class FieldProblem:
    pointer: str
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
    def at(cls, ptr: str, detail: str) -> InputError:
        return cls(detail, [FieldProblem(ptr, detail)])


class BudgetError(BestscaleError):
    """The search could not finish any candidate inside its budget (HTTP 503)."""

    title = "Search budget exhausted"
    kind = "over-budget"


class ModelFailure(BestscaleError):
    """Every candidate failed to fit; the reasons are listed (HTTP 422)."""

    title = "No candidate could be fitted"
    kind = "no-candidate"


@dataclass
class CandidateFailure(Exception):
    """One candidate (or one fold of it) cannot be scored; the search goes on."""

    reason: str
    details: dict[str, Any] = field(default_factory=dict)

    def __str__(self) -> str:  # pragma: no cover - trivial
        return self.reason
