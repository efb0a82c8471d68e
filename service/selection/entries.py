"""One ranking entry: the full-data fit of a specification, in the contract's layout."""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any

import numpy as np

from ..core import retransform
from ..core import sources as src
from ..core import transforms as tr
from ..core.boxtidwell import PowerSummary
from ..core.condition_rules import conditions_for, failed, white_for
from ..core.conditions import ConditionReport, TransformHint
from ..core.cvplus import IntervalMethod, default_method, stored_block
from ..core.cvresult import CVReport, CVResult, OutOfFold
from ..core.data import Prepared
from ..core.errors import CandidateFailure
from ..core.fitting import (
    CoefficientRow,
    OLSFit,
    RobustCovariance,
    StandardErrors,
    hac_cov,
    hc3_cov,
    newey_west_lags,
    ols,
)
from ..core.folds import CVPlan
from ..core.interpret import interpret_fit
from ..core.likelihood import LambdaEstimate, estimate_lambda, fit_transform
from ..core.model import FitOptions, Model, Signing, build_model
from ..core.numbers import fmt
from ..core.spec import Design, Specification, build_design

if TYPE_CHECKING:  # pragma: no cover
    from .search_setup import SearchOptions


@dataclass(frozen=True)
class Simplicity:
    """How simple a specification reads (:meth:`Specification.simplicity`): parameters
    estimated from the response, the readability cost, the transformed columns."""

    estimated: int
    readability: int
    transformed_columns: int

    @classmethod
    def of(cls, spec: Specification) -> Simplicity:
        n_est, cost, n_tr = spec.simplicity()
        return cls(n_est, cost, n_tr)


@dataclass(frozen=True)
class ConditionCount:
    """The regression conditions in a candidate's score: those that count against it in
    the ranking (``failed``; None when its conditions could not be computed, ``note`` then
    says why) and every one that does not hold (``not_holding``; None where not reported)."""

    failed: tuple[str, ...] | None
    not_holding: tuple[str, ...] | None = None
    note: str | None = None


@dataclass(frozen=True)
class ScoreParts:
    """Why a candidate ranks where it does: its CV error and standard error, the band's
    lowest error and threshold, whether it is inside the band, its simplicity, the rule
    that placed it; ranked among others also its distance from the lowest error and the
    paired standard error of that distance (None for a single specification); its failed
    conditions once compared (None before)."""

    cv_value: float
    cv_std_error: float
    best_cv_value: float
    one_se_threshold: float
    within_one_se: bool
    simplicity: Simplicity
    rule: str
    difference_from_best: float | None = None
    paired_std_error: float | None = None
    conditions: ConditionCount | None = None

    @property
    def conditions_failed(self) -> tuple[str, ...] | None:
        return None if self.conditions is None else self.conditions.failed


@dataclass(frozen=True)
class Score:
    """An entry's score: its CV error relative to the lowest (``cv_ratio``) and the parts."""

    cv_ratio: float
    parts: ScoreParts


def finite_or_none(v: Any) -> float | None:
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else None


def equation(spec: Specification, design: Design, coef: np.ndarray) -> str:
    """Readable equation, e.g. ``log(cost) = 2.1 + 0.48·log(area) - 0.03·age``.

    A dummy term ``soil=loam`` is written in parentheses, ``(soil=loam)``, so its ``=``
    does not read as a second equals sign of the equation.
    """
    dummies = {i for t in design.terms if t.kind == "categorical" for i in t.indices}
    parts = []
    for i, (name, b) in enumerate(zip(design.names, coef, strict=True)):
        if name == "intercept":
            parts.append(fmt(b))
            continue
        term = f"({name})" if i in dummies else name
        if not parts:
            parts.append(f"{fmt(b)}·{term}")
        else:
            sign = "-" if b < 0 else "+"
            parts.append(f"{sign} {fmt(abs(b))}·{term}")
    rhs = " ".join(parts) if parts else "0"
    return f"{spec.response_label()} = {rhs}"


def fitted_model(
    spec: Specification, prep: Prepared
) -> tuple[Specification, Design, OLSFit, LambdaEstimate | None]:
    """Fit ``spec`` on all used rows: (concrete spec, design, fit, lambda estimate or None)."""
    design = build_design(spec, prep)
    t = spec.response_transform
    lam_est = None
    if t.needs_lambda:
        lam_est = estimate_lambda(t.name, prep.y, design.X)
        t = tr.Transform(t.name, lam=lam_est.lam, estimated=True)
    else:
        t = fit_transform(t, prep.y)
    msg = t.domain_problem(prep.y, prep.response, "response")
    if msg:
        raise CandidateFailure(msg)
    z = t.forward(prep.y)
    if not np.all(np.isfinite(z)):
        raise CandidateFailure(f"{t.label(prep.response)} overflows on the data")
    fit = ols(design.X, z, design.names, spec.intercept)
    if not (np.isfinite(fit.rss) and np.all(np.isfinite(fit.coef)) and np.all(np.isfinite(fit.se))):
        raise CandidateFailure(
            f"the fit on the {t.label(prep.response)} scale overflows "
            "(values too large for floating point)"
        )
    concrete = Specification(spec.response, t, spec.predictors, spec.intercept)
    return concrete, design, fit, lam_est


@dataclass(frozen=True)
class FitSummary:
    """An entry's all-rows fit: R^2 on the model scale (``r_squared_scale`` says which
    scale that is) and on the original scale, residual SD, residual degrees of freedom,
    log-likelihood, AIC and BIC of the response on its original scale (change-of-variables
    Jacobian), the parameters counted for them and the design's condition number."""

    n: int
    r_squared: float | None
    adj_r_squared: float | None
    r_squared_scale: str
    r_squared_original_scale: float | None
    residual_sd: float | None
    df_residual: int
    log_likelihood_original_scale: float | None
    aic_original_scale: float | None
    bic_original_scale: float | None
    parameters_counted: int
    condition_number: float | None


def fit_block(concrete: Specification, fit: OLSFit, prep: Prepared) -> FitSummary:
    t = concrete.response_transform
    llf_y = fit.llf + t.log_jacobian(prep.y)
    # sigma, plus every parameter estimated from the response: a lambda, Box-Tidwell powers
    k = (
        fit.coef.size
        + 1
        + t.n_estimated
        + sum(p.transform.n_estimated for p in concrete.predictors)
    )
    n = fit.n
    aic = -2.0 * llf_y + 2.0 * k
    bic = -2.0 * llf_y + k * math.log(n)
    mean_fit = retransform.smeared_mean(t, fit.fitted, fit.resid)
    ok = np.isfinite(mean_fit)
    r2o = None
    if np.all(ok):
        tss = float(np.sum((prep.y - prep.y.mean()) ** 2))
        r2o = 1.0 - float(np.sum((prep.y - mean_fit) ** 2)) / tss
    return FitSummary(
        n=n,
        r_squared=finite_or_none(fit.r_squared),
        adj_r_squared=finite_or_none(fit.adj_r_squared),
        r_squared_scale="model" if not t.is_identity else "original",
        r_squared_original_scale=finite_or_none(r2o),
        residual_sd=finite_or_none(fit.sigma),
        df_residual=fit.df_resid,
        log_likelihood_original_scale=finite_or_none(llf_y),
        aic_original_scale=finite_or_none(aic),
        bic_original_scale=finite_or_none(bic),
        parameters_counted=k,
        condition_number=finite_or_none(fit.condition_number),
    )


LAG_RULE = "floor(4 (n/100)^(2/9)), common practice"


def robust_covariances(
    fit: OLSFit, design: Design, prep: Prepared
) -> tuple[tuple[RobustCovariance, ...], int | None]:
    """HC3 always; Newey-West HAC when the rows have an order: (covariances, HAC lags)."""
    hc3 = RobustCovariance(StandardErrors.HC3, hc3_cov(fit, design.X))
    if prep.order is None:
        return (hc3,), None
    lags = newey_west_lags(fit.n)
    return (
        hc3,
        RobustCovariance(StandardErrors.HAC, hac_cov(fit, design.X, prep.order, lags)),
    ), lags


@dataclass(frozen=True)
class Inference:
    """Which standard errors an entry's readings use (``standard_errors``) and why, with its source; the Newey-West lags and their rule when the rows have
    an order; the default prediction interval method and why (None until it is chosen)."""

    standard_errors: StandardErrors
    reason: str
    source: str
    hac_lags: int | None = None
    prediction_intervals: IntervalMethod | None = None
    prediction_interval_reason: str | None = None

    @property
    def hac_lag_rule(self) -> str:
        return LAG_RULE

    def with_intervals(self, method: IntervalMethod, why: str) -> Inference:
        return replace(self, prediction_intervals=method, prediction_interval_reason=why)


def choose_inference(
    conditions: ConditionReport, lags: int | None, blocked: bool
) -> tuple[Inference, str, list[str]]:
    """Which standard errors the readings use: (inference, clause for the sentences,
    warnings).  Failing independence with an order -> Newey-West HAC (also robust to
    unequal variance); failing equal variance -> HC3; otherwise classical."""
    bad = failed(conditions)
    warnings: list[str] = []
    if "independence" in bad and lags is not None:
        kind = StandardErrors.HAC
        reason = "independence fails in the given order"
        clause = f"the interval uses Newey-West standard errors ({lags} lags) because {reason}"
        if not blocked:
            warnings.append(
                "Residuals are serially correlated in the given order, but the "
                "cross-validation folds were random, not blocked, so the CV error is "
                "optimistic; send validation.scheme 'blocked' to score on contiguous folds."
            )
    elif "equal_variance" in bad:
        kind = StandardErrors.HC3
        reason = "equal variance fails"
        clause = f"the interval uses HC3 standard errors because {reason}"
    else:
        kind = StandardErrors.CLASSICAL
        reason, clause = "the conditions they rest on are not rejected", ""
    return Inference(kind, reason, src.STANDARD_ERRORS[kind], lags), clause, warnings


def attach_cv_plus(
    entry: EntryReport,
    design: Design,
    oof: OutOfFold | None,
    why_none: str,
    prep: Prepared,
    plan: CVPlan,
) -> EntryReport:
    """The entry with the CV+ fits stored in its model and its default interval method
    taken from them.  ``design`` is the entry's all-rows design (:attr:`Entry.design`)."""
    block = stored_block(oof, design.X, prep.y, plan.scheme, why_none)
    assert isinstance(entry.model, Model)  # not yet marked for signing
    model = replace(entry.model, cv_store=block)
    method, why = default_method(model.conditions_failed, block.available, block.reason)
    return replace(entry, model=model, inference=entry.inference.with_intervals(method, why))


@dataclass(frozen=True)
class LadderReading:
    """An estimate read as a ladder value (an entry's ``estimates.read_as_ladder``): the
    response lambda (``column`` None) or the power of predictor ``column``, the ladder scale
    it is read as, and the CV error of the candidate with the estimate."""

    estimate: LambdaEstimate | PowerSummary
    read_as: str
    cv_value_estimated: float
    column: str | None = None


@dataclass(frozen=True)
class Estimates:
    """What an entry's scales estimated from the response: the response lambda (with the
    lambda of each training fold, when the folds estimated it), the predictors' powers
    (column -> summary, with each fold's power) and the estimates read as the ladder values
    it lists."""

    response_lambda: LambdaEstimate | None = None
    predictor_powers: dict[str, PowerSummary] | None = None
    read_as_ladder: tuple[LadderReading, ...] = ()


@dataclass(frozen=True)
class EntryReport:
    """One listed specification as the contract lists it: its place (``rank``; None for a
    specification diagnosed alone), the concrete specification and its equation, the
    cross-validated error, the all-rows fit, the coefficient rows, the score, the model
    artifact (a typed :class:`Model`; marked :class:`Signing` once the body is finished),
    the warnings, the regression conditions and transform hints,
    the inference, the readings (``interpretation``) and the estimates (None: nothing
    estimated)."""

    specification: Specification
    equation: str
    cv: CVReport
    fit: FitSummary
    coefficients: tuple[CoefficientRow, ...]
    score: Score
    model: Model | Signing
    warnings: tuple[str, ...]
    conditions: ConditionReport
    transform_hints: tuple[TransformHint, ...]
    inference: Inference
    interpretation: Any
    estimates: Estimates | None = None
    rank: int | None = None


@dataclass(frozen=True)
class Entry:
    """One listed specification: its ``report`` (the contract entry) and the all-rows
    ``design`` and ``fit`` it was computed from (for the CV+ block, the lambda context and
    plot data, which then need no second fit)."""

    report: EntryReport
    design: Design
    fit: OLSFit


def entry_for(
    spec: Specification,
    cv: CVResult,
    plan: CVPlan,
    prep: Prepared,
    parts: ScoreParts,
    opts: SearchOptions,
    service_version: str,
    *,
    white: bool = True,
) -> Entry:
    """The entry of ``spec``: its full-data fit, conditions, readings and typed model (whose
    artifact the web floor writes and signs when the body leaves); ``white=False`` leaves
    White's test to :func:`with_white` (a search lists only some of the entries it makes)."""
    concrete, design, fit, lam_est = fitted_model(spec, prep)
    warnings: list[str] = []
    if lam_est is not None:
        if cv.fold_lambdas:
            lam_est = replace(lam_est, per_fold=tuple(cv.fold_lambdas))
        if lam_est.at_bound:
            warnings.append(
                f"The {concrete.response_transform.name} lambda sits at the search "
                "bound (-3 or 3); the scale is poorly determined."
            )
    t = concrete.response_transform
    if t.name == "log" and t.shift:
        warnings.append(
            f"'{prep.response}' has zeros, so the log uses a shift of {t.shift:.6g} "
            "(half the smallest positive value); the shift changes the results."
        )
    for p in concrete.predictors:
        if p.transform.name == "log" and p.transform.shift:
            warnings.append(
                f"'{p.column}' has zeros, so its log uses a shift of "
                f"{p.transform.shift:.6g} (half the smallest positive value)."
            )
    if fit.condition_number > 1e4 and len(design.names) > 2:
        warnings.append(
            f"The design is ill-conditioned (condition number of the column-scaled "
            f"design {fit.condition_number:.3g}); coefficients are unstable."
        )
    covs, lags = robust_covariances(fit, design, prep)
    conditions, hints = conditions_for(
        design, fit, prep, fit.fitted + fit.resid, opts.alpha, white=white
    )
    bad = failed(conditions)
    cv_plus = stored_block(cv.out_of_fold, design.X, prep.y, plan.scheme)
    model = build_model(
        concrete,
        design,
        fit,
        prep,
        service_version,
        FitOptions.of(plan),
        cv_plus=cv_plus,
        conditions_failed=bad,
    )
    table = fit.table(robust=covs)
    for h in hints:
        if h.bulge and h.sentence:
            warnings.append(h.sentence)
    blocked = getattr(opts, "scheme", "random") == "blocked"
    inference, clause, more = choose_inference(conditions, lags, blocked)
    method, why = default_method(bad, cv_plus.available, cv_plus.reason)
    warnings.extend(more)
    interpretation = interpret_fit(
        concrete,
        design,
        fit,
        prep,
        getattr(opts, "units", None),
        table=table,
        clause=clause,
        standard_errors=inference.standard_errors,
    )
    estimates = None
    if lam_est is not None:
        estimates = Estimates(response_lambda=lam_est)
    report = EntryReport(
        specification=concrete,
        equation=equation(concrete, design, fit.coef),
        cv=CVReport.of(cv, plan),
        fit=fit_block(concrete, fit, prep),
        coefficients=tuple(table),
        score=Score(cv.value / parts.best_cv_value if parts.best_cv_value > 0 else 1.0, parts),
        model=model,
        warnings=tuple(warnings),
        conditions=conditions,
        transform_hints=tuple(hints),
        inference=inference.with_intervals(method, why),
        interpretation=interpretation,
        estimates=estimates,
    )
    return Entry(report, design, fit)


def with_white(entry: Entry, prep: Prepared, alpha: float, seconds: float | None) -> Entry:
    """``entry`` (made with ``white=False``) with White's test in its conditions, run when
    its estimated cost fits in ``seconds`` (else the check says why it did not run); White's
    test decides nothing, so the rest of the entry stands as it is."""
    report = entry.report
    conditions = white_for(entry.design, entry.fit, prep, report.conditions, alpha, seconds)
    return replace(entry, report=replace(report, conditions=conditions))
