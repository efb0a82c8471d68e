"""Compare the specification in use (the incumbent) with this run's winner.

The incumbent is scored on exactly the same cross-validation folds as every
candidate, so the fold errors pair up.  The paired difference (winner minus
incumbent, per fold) has mean d and standard error sd(d)/sqrt(K) (the same
convention as the CV standard error).  Decision rule (documented design
choice): ``switch`` when the winner's error is lower by more than one paired
standard error (d < -SE), or when the incumbent fails a regression condition
that the winner passes, or when the incumbent cannot be fitted on the new
data; otherwise ``keep``, since replacing a production model has a cost.

:func:`decide` returns a frozen :class:`IncumbentDecision`; ``service/api/render/incumbent.py``
writes its contract form.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np

from ..core import transforms as tr
from ..core.condition_rules import failed
from ..core.conditions import ConditionReport
from ..core.crossval import cross_validate
from ..core.cvresult import CVReport, CVResult, std_error_of
from ..core.data import Prepared
from ..core.errors import CandidateFailure, InputError, SpecField
from ..core.folds import CVPlan
from ..core.numbers import fmt
from ..core.spec import PredictorSpec, Specification, build_design, resolve_predictor_transforms
from .entries import EntryReport


def incumbent_spec(
    sent: Specification,
    prep: Prepared,
    request_predictors: list[str],
    table_columns: set[str] | None = None,
) -> tuple[Specification | None, str | None]:
    """Build the incumbent ``sent`` by the request on this run's rows: (spec, None) or
    (None, why it cannot be fitted)."""
    if sent.response != prep.response:
        raise InputError.at(
            SpecField.response("column"),
            f"the incumbent models '{sent.response}' but this request's "
            f"response is '{prep.response}'",
        )
    preds = []
    for i, p in enumerate(sent.predictors):
        col = p.column
        if col not in request_predictors:
            if table_columns is not None and col not in table_columns:
                return None, f"the incumbent uses '{col}', which is not in this data"
            raise InputError.at(
                SpecField.of_predictor(i, "column"),
                f"the incumbent uses '{col}'; add it to 'predictors' so both are "
                "scored on the same rows",
            )
        t = p.transform
        if col in prep.categorical and t.name != "categorical":
            t = tr.Transform("categorical")
        elif col in prep.numeric and t.name == "categorical":
            return None, f"the incumbent treats '{col}' as categorical but it is numeric here"
        preds.append(PredictorSpec(col, t))
    rt = sent.response_transform
    spec = Specification(prep.response, rt, tuple(preds), sent.intercept)
    msg = rt.domain_problem(prep.y, prep.response, "response")
    if msg:
        return None, msg
    try:
        spec = resolve_predictor_transforms(spec, prep)
    except CandidateFailure as exc:
        return None, exc.reason
    return spec, None


def score(spec: Specification, prep: Prepared, plan: CVPlan, shift_needed: bool) -> CVResult:
    design = build_design(spec, prep)
    return cross_validate(
        design.X, prep.y, spec.response_transform, plan, shift_needed, design.names
    )


def _failed_conditions(conditions: ConditionReport | None) -> set[str]:
    return set(failed(conditions))


#: what the paired difference means (stated with it)
DIFFERENCE_MEANING = (
    "winner minus incumbent, mean over the same folds; negative means the winner predicts better"
)


@dataclass(frozen=True)
class PairedDifference:
    """Winner minus incumbent: the mean of the fold-by-fold differences and its standard
    error (:data:`DIFFERENCE_MEANING`)."""

    value: float
    std_error: float


@dataclass(frozen=True)
class IncumbentDecision:
    """Keep or switch, with the sentence that says why.  ``spec`` is the incumbent as built
    on this run's rows (None when it could not be; then ``as_sent``, the request's own
    specification in the form the web layer shows back, stands for it); ``rank`` its place in this run's ranking; ``cv`` its cross-validated
    error (None, like ``difference``, when it could not be scored)."""

    spec: Specification | None
    as_sent: object
    rank: int | None
    cv: CVReport | None
    difference: PairedDifference | None
    decision: Literal["keep", "switch"]
    reason: str


def decide(
    inc_spec: Specification | None,
    inc_cv: CVResult | None,
    reason: str | None,
    rank: int | None,
    winner_entry: EntryReport,
    winner_folds: np.ndarray,
    plan: CVPlan,
    inc_conditions: ConditionReport | None = None,
    request_spec: object = None,
) -> IncumbentDecision:
    """Keep the incumbent or switch to rank 1 (``winner_entry``, whose fold errors are
    ``winner_folds``), by the rule of this module."""
    if inc_spec is None or inc_cv is None:
        return IncumbentDecision(
            inc_spec,
            request_spec,
            rank,
            None,
            None,
            "switch",
            f"The incumbent cannot be fitted on this data: "
            f"{reason}; switch to rank 1 ({winner_entry.equation}).",
        )
    same = winner_entry.specification.written_alike() == inc_spec.written_alike() or rank == 1
    # the same specification on the same folds differs by exactly 0; the two scoring paths
    # (search and incumbent refit) agree only to rounding, so the rounding is not reported
    d = np.zeros_like(inc_cv.fold_values) if same else winner_folds - inc_cv.fold_values
    se = std_error_of(d, plan.folds)
    diff = float(np.mean(d))
    metric = plan.metric
    inc_fail = _failed_conditions(inc_conditions)
    win_fail = _failed_conditions(winner_entry.conditions)
    only_inc = sorted(inc_fail - win_fail)
    decision: Literal["keep", "switch"]
    if same:
        decision, why = "keep", "The incumbent is this run's rank-1 specification."
    elif diff < -se:
        decision = "switch"
        why = (
            f"Rank 1 ({winner_entry.equation}) has a lower cross-validated {metric} by "
            f"{fmt(-diff)} (paired standard error {fmt(se)}), more than one standard error."
        )
    elif only_inc:
        decision = "switch"
        why = (
            "The incumbent fails "
            + ", ".join(c.replace("_", " ") for c in only_inc)
            + f", which rank 1 ({winner_entry.equation}) passes; their {metric} differ by "
            f"{fmt(diff)} (paired standard error {fmt(se)})."
        )
    else:
        decision = "keep"
        why = (
            f"Rank 1 differs from the incumbent by {diff:.4g} in cross-validated {metric} "
            f"(paired standard error {se:.4g}), within one standard error; keep the incumbent."
        )
    return IncumbentDecision(
        inc_spec,
        request_spec,
        rank,
        CVReport.of(inc_cv, plan),
        PairedDifference(diff, se),
        decision,
        why,
    )
