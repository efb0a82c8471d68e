"""One ranking entry: the full-data fit of a specification, in the contract's layout."""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING, Any

import numpy as np

from ..core import retransform
from ..core import sources as src
from ..core import transforms as tr
from ..core.condition_rules import conditions_for, failed
from ..core.conditions import ConditionReport
from ..core.cvplus import default_method, stored_block
from ..core.cvresult import CVReport, CVResult, OutOfFold
from ..core.data import Prepared
from ..core.errors import CandidateFailure
from ..core.fitting import OLSFit, hac_cov, hc3_cov, newey_west_lags, ols
from ..core.folds import CVPlan
from ..core.interpret import interpret_fit
from ..core.likelihood import LambdaEstimate, estimate_lambda, fit_transform
from ..core.model import FitOptions, build_model
from ..core.numbers import fmt
from ..core.spec import Design, Specification, build_design

if TYPE_CHECKING:  # pragma: no cover
    from .search_setup import SearchOptions


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


def fit_block(concrete: Specification, fit: OLSFit, prep: Prepared) -> dict[str, Any]:
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
    return {
        "n": n,
        "r_squared": finite_or_none(fit.r_squared),
        "adj_r_squared": finite_or_none(fit.adj_r_squared),
        "r_squared_scale": "model" if not t.is_identity else "original",
        "r_squared_original_scale": finite_or_none(r2o),
        "residual_sd": finite_or_none(fit.sigma),
        "df_residual": fit.df_resid,
        "log_likelihood_original_scale": finite_or_none(llf_y),
        "aic_original_scale": finite_or_none(aic),
        "bic_original_scale": finite_or_none(bic),
        "parameters_counted": k,
        "condition_number": finite_or_none(fit.condition_number),
    }


LAG_RULE = "floor(4 (n/100)^(2/9)), common practice"


def robust_covariances(
    fit: OLSFit, design: Design, prep: Prepared
) -> tuple[dict[str, np.ndarray], int | None]:
    """HC3 always; Newey-West HAC when the rows have an order: (covariances, HAC lags)."""
    covs = {"hc3": hc3_cov(fit, design.X)}
    lags = None
    if prep.order is not None:
        lags = newey_west_lags(fit.n)
        covs["hac"] = hac_cov(fit, design.X, prep.order, lags)
    return covs, lags


def choose_inference(
    conditions: ConditionReport, lags: int | None, blocked: bool
) -> tuple[dict[str, Any], str, list[str]]:
    """Which standard errors the readings use: (inference block, clause for the
    sentences, warnings).  Failing independence with an order -> Newey-West HAC (also
    robust to unequal variance); failing equal variance -> HC3; otherwise classical."""
    bad = failed(conditions)
    warnings: list[str] = []
    if "independence" in bad and lags is not None:
        kind = "hac"
        reason = "independence fails in the given order"
        clause = f"the interval uses Newey-West standard errors ({lags} lags) because {reason}"
        if not blocked:
            warnings.append(
                "Residuals are serially correlated in the given order, but the "
                "cross-validation folds were random, not blocked, so the CV error is "
                "optimistic; send validation.scheme 'blocked' to score on contiguous folds."
            )
    elif "equal_variance" in bad:
        kind = "hc3"
        reason = "equal variance fails"
        clause = f"the interval uses HC3 standard errors because {reason}"
    else:
        kind, reason, clause = "classical", "the conditions they rest on are not rejected", ""
    block: dict[str, Any] = {
        "standard_errors": kind,
        "reason": reason,
        "source": src.STANDARD_ERRORS[kind],
    }
    if lags is not None:
        block["hac_lags"] = lags
        block["hac_lag_rule"] = LAG_RULE
    return block, clause, warnings


def attach_cv_plus(
    entry: dict[str, Any],
    design: Design,
    oof: OutOfFold | None,
    why_none: str,
    prep: Prepared,
    plan: CVPlan,
) -> None:
    """Store the CV+ fits in the entry body's model and set the entry's default interval
    method from them.  ``design`` is the entry's all-rows design (:attr:`Entry.design`)."""
    block = stored_block(oof, design.X, prep.y, plan.scheme, why_none)
    model = replace(entry["model"], cv_store=block)
    entry["model"] = model
    method, why = default_method(model.conditions_failed, block.available, block.reason)
    entry["inference"] = {
        **entry["inference"],
        "prediction_intervals": method,
        "prediction_interval_reason": why,
    }


@dataclass(frozen=True)
class Entry:
    """One listed specification: its contract ``body`` and the all-rows ``design`` and
    ``fit`` it was computed from (for the CV+ block, the lambda context and plot data,
    which then need no second fit)."""

    body: dict[str, Any]
    design: Design
    fit: OLSFit


def entry_for(
    spec: Specification,
    cv: CVResult,
    plan: CVPlan,
    prep: Prepared,
    parts: dict[str, Any],
    opts: SearchOptions,
    service_version: str,
) -> Entry:
    """The entry of ``spec``: its full-data fit, conditions, readings and typed model (whose
    artifact the web floor writes and signs when the body leaves)."""
    concrete, design, fit, lam_est = fitted_model(spec, prep)
    warnings: list[str] = []
    estimates = {}
    if lam_est is not None:
        if cv.fold_lambdas:
            lam_est = replace(lam_est, per_fold=tuple(cv.fold_lambdas))
        estimates["response_lambda"] = lam_est
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
    conditions, hints = conditions_for(design, fit, prep, fit.fitted + fit.resid, opts.alpha)
    bad = failed(conditions)
    cv_plus = stored_block(cv.out_of_fold, design.X, prep.y, plan.scheme)
    entry: dict[str, Any] = {
        "specification": concrete.to_dict(),
        "equation": equation(concrete, design, fit.coef),
        "cv": CVReport.of(cv, plan),
        "fit": fit_block(concrete, fit, prep),
        "coefficients": fit.table(robust=covs),
        "score": {
            "cv_ratio": cv.value / parts["best_cv_value"] if parts["best_cv_value"] > 0 else 1.0,
            "parts": parts,
        },
        "model": build_model(
            concrete,
            design,
            fit,
            prep,
            service_version,
            FitOptions.of(plan),
            cv_plus=cv_plus,
            conditions_failed=bad,
        ),
        "warnings": warnings,
    }
    entry["conditions"] = conditions
    entry["transform_hints"] = list(hints)
    for h in hints:
        if h.bulge and h.sentence:
            warnings.append(h.sentence)
    blocked = getattr(opts, "scheme", "random") == "blocked"
    inference, clause, more = choose_inference(conditions, lags, blocked)
    method, why = default_method(bad, cv_plus.available, cv_plus.reason)
    inference["prediction_intervals"] = method
    inference["prediction_interval_reason"] = why
    entry["inference"] = inference
    warnings.extend(more)
    entry["interpretation"] = interpret_fit(
        concrete,
        design,
        fit,
        prep,
        getattr(opts, "units", None),
        table=entry["coefficients"],
        clause=clause,
        standard_errors=inference["standard_errors"],
    )
    if estimates:
        entry["estimates"] = estimates
    return Entry(entry, design, fit)
