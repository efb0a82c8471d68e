"""Contract form of a ranking entry's parts: its score (``score``: the CV ratio and the
parts that placed it)."""

from __future__ import annotations

from typing import Any

from ...selection import entries as e
from . import contract


@contract.register
def simplicity(s: e.Simplicity) -> dict[str, Any]:
    return {
        "estimated": s.estimated,
        "readability": s.readability,
        "transformed_columns": s.transformed_columns,
    }


@contract.register
def score_parts(p: e.ScoreParts) -> dict[str, Any]:
    out: dict[str, Any] = {
        "cv_value": p.cv_value,
        "cv_std_error": p.cv_std_error,
        "best_cv_value": p.best_cv_value,
    }
    if p.difference_from_best is not None:
        out["difference_from_best"] = p.difference_from_best
    if p.paired_std_error is not None:
        out["paired_std_error"] = p.paired_std_error
    out |= {
        "one_se_threshold": p.one_se_threshold,
        "within_one_se": p.within_one_se,
        "simplicity": simplicity(p.simplicity),
        "rule": p.rule,
    }
    c = p.conditions
    if c is not None:
        out["conditions_failed"] = None if c.failed is None else list(c.failed)
        if c.not_holding is not None:
            out["conditions_not_holding"] = list(c.not_holding)
        if c.note is not None:
            out["conditions_note"] = c.note
    return out


@contract.register
def score(s: e.Score) -> dict[str, Any]:
    return {"cv_ratio": s.cv_ratio, "parts": score_parts(s.parts)}
