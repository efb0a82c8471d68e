"""Contract form of the search's summary blocks."""

from __future__ import annotations

from typing import Any

from ...selection import search as s
from . import contract


@contract.register
def band(b: s.BandReport) -> dict[str, Any]:
    return {
        "lowest_cv_value": b.band.lowest,
        "std_error_of_lowest": b.band.std_error,
        "threshold": b.band.threshold,
        "rule": s.BAND_RULE,
        "source": s.BAND_SOURCE,
        "conditions": {
            "members_compared": b.members_compared,
            "conditions_ordering": list(b.ordering),
            "alpha": b.alpha,
            "rule": s.BAND_CONDITIONS_RULE,
            "source": s.CONDITIONS_SOURCE,
        },
    }


@contract.register
def strategy(r: s.StrategyReport) -> dict[str, Any]:
    return {
        "name": r.name,
        "exhaustive_limit": r.exhaustive_limit,
        "description": r.description,
        "stopped_by": r.stopped_by,
    }


@contract.register
def failure_group(g: s.FailureGroup) -> dict[str, Any]:
    return {"reason": g.reason, "candidates": g.candidates, "wordings": g.wordings}
