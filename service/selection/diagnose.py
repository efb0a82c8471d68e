"""One specification exactly as the caller sent it: its cross-validated error, ranking
entry (conditions, interpretation, model) and plot data, without any search."""

from __future__ import annotations

from dataclasses import replace

from ..core import transforms as tr
from ..core.condition_rules import failed
from ..core.crossval import cross_validate
from ..core.data import Prepared
from ..core.errors import CandidateFailure, InputError, ModelFailure, SpecField
from ..core.folds import make_plan
from ..core.plots import DiagnosticPlots
from ..core.spec import build_design, resolve_predictor_transforms
from .candidates import check_explicit, check_predictor_transform
from .entries import ConditionCount, EntryReport, ScoreParts, entry_for
from .plots import PLOT_MAX_POINTS, fit_plots
from .search import simplicity_parts
from .search_setup import SearchOptions, SentSpecification, check_rows

#: the score parts' rule of a specification diagnosed alone
SINGLE_RULE = "a single specification as sent; nothing was ranked"


def diagnose_specification(
    prep: Prepared,
    sent: SentSpecification,
    opts: SearchOptions,
    service_version: str,
    max_points: int = PLOT_MAX_POINTS,
) -> tuple[EntryReport, DiagnosticPlots]:
    """One specification exactly as given: (ranking entry without rank, plot data).

    Domain problems are :class:`InputError` naming a field of the specification (:class:`SpecField`); a
    specification that cannot be fitted or cross-validated is a :class:`ModelFailure`.
    """
    spec = sent.spec
    rt = spec.response_transform
    check_explicit(
        prep,
        rt,
        prep.y,
        prep.response,
        "response",
        SpecField.response("transform"),
        sent.response_auto_shift,
    )
    msg = rt.domain_problem(prep.y, prep.response, "response")
    if msg:
        raise InputError.at(SpecField.response("transform"), msg)
    for i, p in enumerate(spec.predictors):
        if p.column in prep.numeric:
            check_predictor_transform(
                prep,
                p.transform,
                p.column,
                SpecField.of_predictor(i, "transform"),
                i in sent.predictors_auto_shift,
                lambda_at=SpecField.of_predictor(i, "transform", "lambda"),
            )
    spec = resolve_predictor_transforms(spec, prep)
    try:
        design = build_design(spec, prep)
        check_rows(prep, opts, design.X.shape[1])
        plan = make_plan(
            prep.n, opts.folds, opts.repeats, opts.seed, opts.metric, opts.scheme, prep.order
        )
        cv = cross_validate(design.X, prep.y, rt, plan, tr.needs_shift(prep.y), design.names, True)
        parts = ScoreParts(
            cv_value=cv.value,
            cv_std_error=cv.std_error,
            best_cv_value=cv.value,
            one_se_threshold=cv.value + cv.std_error,
            within_one_se=True,
            simplicity=simplicity_parts(spec),
            rule=SINGLE_RULE,
        )
        listed = entry_for(spec, cv, plan, prep, parts, opts, service_version)
        plots = fit_plots(listed.design, listed.fit, prep, opts.alpha, opts.seed, max_points)
    except CandidateFailure as exc:
        raise ModelFailure(f"the specification cannot be fitted: {exc.reason}") from None
    entry = listed.report
    count = ConditionCount(tuple(failed(entry.conditions)))
    return replace(entry, score=replace(entry.score, parts=replace(parts, conditions=count))), plots
