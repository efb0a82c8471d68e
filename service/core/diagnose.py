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

from typing import TYPE_CHECKING, Any

import numpy as np

from .conditions import ConditionInputs, TermInfo, assess_conditions
from .data import Prepared
from .fitting import OLSFit
from .spec import Design

if TYPE_CHECKING:  # pragma: no cover
    from .search import SearchOptions

CONDITION_NAMES = (
    "linearity",
    "normality",
    "equal_variance",
    "independence",
    "multicollinearity",
    "influence",
)


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


def diagnose_specification(
    prep: Prepared,
    spec_dict: dict[str, Any],
    opts: SearchOptions,
    service_version: str,
    max_points: int = 2000,
) -> tuple[dict[str, Any], dict[str, Any]]:
    """One specification exactly as given: (ranking entry without rank, plot data).

    Domain problems are :class:`InputError` pointing into ``/specification``; a
    specification that cannot be fitted or cross-validated is a :class:`ModelFailure`.
    """
    from . import transforms as tr
    from .candidates import check_explicit
    from .crossval import cross_validate, make_plan
    from .errors import CandidateFailure, InputError, ModelFailure, pointer
    from .plots import diagnostic_plots
    from .report import entry_for, fitted_model
    from .spec import Specification, build_design, resolve_predictor_transforms

    spec = Specification.from_dict(spec_dict)
    rt = spec.response_transform
    check_explicit(
        prep,
        rt,
        prep.y,
        prep.response,
        "response",
        "/specification/response/transform",
        spec_dict["response"].get("transform"),
    )
    msg = rt.domain_problem(prep.y, prep.response, "response")
    if msg:
        raise InputError.at("/specification/response/transform", msg)
    for i, p in enumerate(spec.predictors):
        if p.column in prep.numeric:
            if p.transform.name == "categorical":
                raise InputError.at(
                    pointer("specification", "predictors", i, "transform"),
                    f"'{p.column}' is numeric; list it in 'categorical' to treat it as levels",
                )
            if p.transform.name in ("box_cox", "yeo_johnson") and p.transform.lam is None:
                raise InputError.at(
                    pointer("specification", "predictors", i, "transform", "lambda"),
                    f"{p.transform.name} of a predictor needs an explicit lambda",
                )
            check_explicit(
                prep,
                p.transform,
                prep.numeric[p.column],
                p.column,
                "predictor",
                pointer("specification", "predictors", i, "transform"),
                spec_dict["predictors"][i].get("transform"),
            )
            msg = p.transform.domain_problem(prep.numeric[p.column], p.column, "predictor")
            if msg:
                raise InputError.at(pointer("specification", "predictors", i, "transform"), msg)
    spec = resolve_predictor_transforms(spec, prep)
    try:
        design = build_design(spec, prep, ptr_prefix="/specification")
        from .search import _check_rows

        _check_rows(prep, opts, design.X.shape[1])
        plan = make_plan(
            prep.n, opts.folds, opts.repeats, opts.seed, opts.metric, opts.scheme, prep.order
        )
        cv = cross_validate(design.X, prep.y, rt, plan, tr.needs_shift(prep.y), design.names)
        parts = {
            "cv_value": cv.value,
            "cv_std_error": cv.std_error,
            "best_cv_value": cv.value,
            "one_se_threshold": cv.value + cv.std_error,
            "within_one_se": True,
            "simplicity": dict(
                zip(
                    ("estimated", "readability", "transformed_columns"),
                    spec.simplicity(),
                    strict=True,
                )
            ),
            "rule": "a single specification as sent; nothing was ranked",
        }
        entry = entry_for(spec, cv, plan, prep, parts, opts, service_version)
        _, design, fit, _ = fitted_model(spec, prep)
    except CandidateFailure as exc:
        raise ModelFailure(f"the specification cannot be fitted: {exc.reason}") from None
    entry["score"]["parts"]["conditions_failed"] = failed(entry["conditions"])
    inp = condition_inputs(design, fit, prep, fit.fitted + fit.resid, opts.alpha)
    plots = diagnostic_plots(inp, max_points=max_points, seed=opts.seed)
    return entry, plots
