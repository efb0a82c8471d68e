"""Contract form of a grouped selection's parts (its search summary, a failed group)."""

from __future__ import annotations

from typing import Any

from ...selection import groups as g
from ..errors import group_problem
from .registry import contract


@contract.register
def groups_summary(s: g.GroupsSummary) -> dict[str, Any]:
    return {
        "groups": s.groups,
        "groups_failed": s.failed,
        "elapsed_s": s.elapsed_s,
        "complete": s.complete,
    }


@contract.register
def group_failure(f: g.GroupFailure) -> dict[str, Any]:
    """A group that could not be modelled, as the selections endpoint writes it."""
    return group_problem(f)
