"""Regression conditions of one fitted specification, and how they enter the ranking.

Ranking rule for conditions (documented design choice): cross-validated error
stays the primary criterion.  Within the one-standard-error band the leading
candidates (the first ``max(3 * top, 15)`` by the band's simplicity order) are
assessed and re-ordered by the number of conditions that fail
(:func:`failed_for_ranking`: ``holds`` is false and, where the tests give p-values,
the smallest is below alpha over the number of conditions tested), then by their
previous order.  Candidates outside the band are never
moved above a band member, so a condition failure cannot promote a clearly
worse predictor; and when the lowest-error candidate is displaced because it
fails a condition the response says so in a warning.
"""

from __future__ import annotations

from typing import Any

import numpy as np

from .conditions import CONDITION_NAMES, ConditionInputs, TermInfo, assess_conditions
from .data import Prepared
from .fitting import OLSFit
from .spec import Design


def condition_inputs(
    design: Design, fit: OLSFit, prep: Prepared, z: np.ndarray, alpha: float
) -> ConditionInputs:
    terms = tuple(
        TermInfo(t.column, t.kind, tuple(t.indices), t.raw, t.label) for t in design.terms
    )
    return ConditionInputs(
        z=z,
        X=design.X,
        has_intercept=fit.has_intercept,
        terms=terms,
        row_ids=prep.row_ids,
        order=prep.order,
        alpha=alpha,
    )


def conditions_for(
    design: Design, fit: OLSFit, prep: Prepared, z: np.ndarray, alpha: float
) -> tuple[dict[str, Any], list[dict[str, Any]]]:
    """(conditions block of the contract, transform hints)."""
    out = assess_conditions(condition_inputs(design, fit, prep, z, alpha))
    hints = out.pop("hints", [])
    return {k: out[k] for k in CONDITION_NAMES}, hints


def failed(conditions: dict[str, Any] | None) -> list[str]:
    if not conditions:
        return []
    return [c for c in CONDITION_NAMES if conditions.get(c, {}).get("holds") is False]


def failed_for_ranking(conditions: dict[str, Any] | None, alpha: float) -> list[str]:
    """Conditions that count against a candidate in the ranking.

    A condition counts when it does not hold and, where its tests give p-values, the
    smallest is below ``alpha`` divided by the number of conditions tested (Bonferroni
    over the conditions), so a specification that meets every condition is displaced by
    a chance rejection with probability at most ``alpha``.  Conditions judged by
    thresholds (no p-value) count when they do not hold.
    """
    if not conditions:
        return []
    tested = [c for c in CONDITION_NAMES if conditions.get(c, {}).get("holds") is not None]
    level = alpha / max(len(tested), 1)
    out = []
    for c in failed(conditions):
        ps = [
            t["p_value"]
            for t in conditions[c].get("tests", [])
            if isinstance(t.get("p_value"), float)
        ]
        if not ps or min(ps) < level:
            out.append(c)
    return out
