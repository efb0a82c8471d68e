"""Contract form of the incumbent decision (``incumbent``: keep or switch)."""

from __future__ import annotations

from typing import Any

from ...selection import incumbent as inc
from .registry import contract


@contract.register
def incumbent(d: inc.IncumbentDecision) -> dict[str, Any]:
    return {
        "specification": d.spec.to_dict() if d.spec is not None else d.as_sent,
        "rank": d.rank,
        "cv": None if d.cv is None else contract(d.cv),
        "difference": None
        if d.difference is None
        else {
            "value": d.difference.value,
            "std_error": d.difference.std_error,
            "meaning": inc.DIFFERENCE_MEANING,
        },
        "decision": d.decision,
        "reason": d.reason,
    }
