"""Regression conditions of one fitted specification, and how they enter the ranking.

Ranking rule for conditions (documented design choice): cross-validated error
stays the primary criterion.  Within the one-standard-error band the leading
candidates (the first ``max(3 * top, 15)`` by the band's simplicity order) are
assessed and re-ordered by the number of conditions that fail
(:func:`failed_for_ranking`): a condition takes part when some assessed member fails
it clearly (the deciding test's p-value below alpha over the number of deciding tests
of all assessed members) and some member meets it; then every member that does not
meet it at alpha counts it.  Ties keep their previous order.  Candidates outside the band are never
moved above a band member, so a condition failure cannot promote a clearly
worse predictor; and when the lowest-error candidate is displaced because it
fails a condition the response says so in a warning.
"""

from __future__ import annotations

import numpy as np

from .conditions import (
    ConditionInputs,
    ConditionReport,
    TransformHint,
    assess_conditions,
    with_white,
)
from .data import Prepared
from .fitting import OLSFit
from .spec import Design


def condition_inputs(
    design: Design, fit: OLSFit, prep: Prepared, z: np.ndarray, alpha: float
) -> ConditionInputs:
    terms = tuple(design.terms)
    return ConditionInputs(
        z=z,
        X=design.X,
        has_intercept=fit.has_intercept,
        terms=terms,
        row_numbers=prep.row_numbers,
        order=prep.order,
        alpha=alpha,
    )


def conditions_for(
    design: Design,
    fit: OLSFit,
    prep: Prepared,
    z: np.ndarray,
    alpha: float,
    *,
    white: bool = True,
) -> tuple[ConditionReport, tuple[TransformHint, ...]]:
    """(the conditions, the transform hints) of one fitted specification; ``white=False``
    leaves White's test for :func:`white_for` (see :func:`assess_conditions`)."""
    out = assess_conditions(condition_inputs(design, fit, prep, z, alpha), white=white)
    return out, out.hints


def white_for(
    design: Design,
    fit: OLSFit,
    prep: Prepared,
    conditions: ConditionReport,
    alpha: float,
    seconds: float | None,
) -> ConditionReport:
    """``conditions`` of one fitted specification (from :func:`conditions_for` with
    ``white=False``) with White's test added, within ``seconds`` (:func:`with_white`)."""
    z = fit.fitted + fit.resid
    inp = condition_inputs(design, fit, prep, z, alpha)
    # the fit's own residuals where it has full rank (a rank-deficient design is fitted
    # again, so White's residuals are those of the conditions' rank decision)
    full_rank = fit.df_resid == fit.n - design.X.shape[1]
    return with_white(conditions, inp, seconds, fit.resid if full_rank else None)


def failed(conditions: ConditionReport | None) -> list[str]:
    """The conditions that do not hold, in the order of :data:`CONDITION_NAMES`."""
    if conditions is None:
        return []
    return [name for name, c in conditions.named() if c.holds is False]


def clear_failures(conditions: ConditionReport | None, alpha: float, members: int = 1) -> list[str]:
    """Conditions this member fails clearly: at the level of every test that can reorder
    the band.

    The p-value of the test that decides the condition (the test marked ``primary``;
    where none is marked, the smallest p-value given) is below ``alpha`` divided by the
    conditions tested times ``members``, the number of band members compared (Bonferroni
    over every such test; Dunn 1961).  Reported-only tests (White, Jarque-Bera,
    Anderson-Darling, rainbow, curvature) never decide: the smallest of several p-values
    is not a p-value at the level of one test.  Conditions judged by thresholds (no
    p-value) fail clearly when they do not hold.
    """
    if conditions is None:
        return []
    tested = [name for name, c in conditions.named() if c.holds is not None]
    level = alpha / (max(len(tested), 1) * max(members, 1))
    out = []
    for name in failed(conditions):
        tests = [t for t in conditions.of(name).tests if t.p_value is not None]
        deciding = [t for t in tests if t.primary] or tests
        ps = [t.p_value for t in deciding if t.p_value is not None]
        if not ps or min(ps) < level:
            out.append(name)
    return out


def ordering_conditions(members: list[ConditionReport | None], alpha: float) -> frozenset[str]:
    """The conditions that reorder a band of compared ``members``.

    A condition takes part when the band gives clear evidence about it: some member fails
    it clearly (:func:`clear_failures`) and some member meets it.  So a band whose members
    all meet every condition is reordered by a chance rejection with probability at most
    ``alpha``, and a condition no member meets (heavy-tailed errors, say) describes the
    data, not a scale, and reorders nothing.
    """
    m = len(members)
    clear = {c for cond in members for c in clear_failures(cond, alpha, m)}
    met = {name for cond in members if cond for name, c in cond.named() if c.holds}
    return frozenset(clear & met)


def failed_for_ranking(conditions: ConditionReport | None, ordering: frozenset[str]) -> list[str]:
    """Conditions that count against a member: those of ``ordering``
    (:func:`ordering_conditions`) that it does not meet at alpha, the same standard for
    every member."""
    return [c for c in failed(conditions) if c in ordering]
