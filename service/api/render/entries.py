"""Contract form of a ranking entry: its place and specification, the fit block, the score
(the CV ratio and the parts that placed it), the inference and the estimates; its
cross-validated error and conditions are rendered by ``cv.py`` and ``conditions.py``.

Key order follows the documented layout of an entry."""

from __future__ import annotations

from typing import Any

from ...selection import entries as e
from .estimates import coefficient, ladder_reading, predictor_power, response_lambda
from .registry import contract


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


@contract.register
def fit_summary(f: e.FitSummary) -> dict[str, Any]:
    return {
        "n": f.n,
        "r_squared": f.r_squared,
        "adj_r_squared": f.adj_r_squared,
        "r_squared_scale": f.r_squared_scale,
        "r_squared_original_scale": f.r_squared_original_scale,
        "residual_sd": f.residual_sd,
        "df_residual": f.df_residual,
        "log_likelihood_original_scale": f.log_likelihood_original_scale,
        "aic_original_scale": f.aic_original_scale,
        "bic_original_scale": f.bic_original_scale,
        "parameters_counted": f.parameters_counted,
        "condition_number": f.condition_number,
    }


@contract.register
def inference(i: e.Inference) -> dict[str, Any]:
    out: dict[str, Any] = {
        "standard_errors": i.standard_errors,
        "reason": i.reason,
        "source": i.source,
    }
    if i.hac_lags is not None:
        out |= {"hac_lags": i.hac_lags, "hac_lag_rule": i.hac_lag_rule}
    if i.prediction_intervals is not None:
        out |= {
            "prediction_intervals": i.prediction_intervals,
            "prediction_interval_reason": i.prediction_interval_reason,
        }
    return out


@contract.register
def estimates(est: e.Estimates) -> dict[str, Any]:
    out: dict[str, Any] = {}
    if est.response_lambda is not None:
        out["response_lambda"] = response_lambda(est.response_lambda)
    if est.predictor_powers is not None:
        out["predictor_powers"] = {c: predictor_power(p) for c, p in est.predictor_powers.items()}
    if est.read_as_ladder:
        out["read_as_ladder"] = [ladder_reading(r) for r in est.read_as_ladder]
    return out


@contract.register
def entry(r: e.EntryReport) -> dict[str, Any]:
    out: dict[str, Any] = {} if r.rank is None else {"rank": r.rank}
    out |= {
        "specification": r.specification.to_dict(),
        "equation": r.equation,
        "cv": r.cv,
        "fit": fit_summary(r.fit),
        "coefficients": [coefficient(row) for row in r.coefficients],
        "score": score(r.score),
        "model": r.model,
        "warnings": list(r.warnings),
        "conditions": r.conditions,
        "transform_hints": list(r.transform_hints),
        "inference": inference(r.inference),
        "interpretation": r.interpretation,
    }
    if r.estimates is not None:
        out["estimates"] = estimates(r.estimates)
    return out
