"""Contract form of fitted and estimated numbers: an entry's coefficient table
(``coefficients``: one row per term with the classical inference and, suffixed by their
kind, ``_hc3``/``_hac``, the inference under each robust covariance), its estimated scales
(``estimates``: the response lambda, the predictor powers and the estimates read as ladder
values) and the search's Box-Cox lambda and screened powers (``search.box_cox``,
``search.predictor_powers``).

Coefficient numbers that are not finite are written as null, as everywhere in the contract.
"""

from __future__ import annotations

import math
from typing import Any

from ...core.boxtidwell import PowerSummary
from ...core.fitting import CoefficientRow, Inference
from ...core.likelihood import LambdaEstimate
from ...selection.entries import LadderReading
from ...selection.search import BoxCoxReport, LambdaOnDesign, ScreenedPower
from .registry import contract


def _finite(v: float | None) -> float | None:
    return v if v is None or math.isfinite(v) else None


def _inference(i: Inference, suffix: str) -> dict[str, Any]:
    return {
        f"std_error{suffix}": _finite(i.std_error),
        f"t_statistic{suffix}": _finite(i.t_statistic),
        f"p_value{suffix}": _finite(i.p_value),
        f"ci_low{suffix}": _finite(i.ci_low),
        f"ci_high{suffix}": _finite(i.ci_high),
    }


@contract.register
def coefficient(row: CoefficientRow) -> dict[str, Any]:
    out = {"term": row.term, "estimate": _finite(row.estimate)} | _inference(row.classical, "")
    for kind, inference in row.robust:
        out |= _inference(inference, f"_{kind}")
    return out


def _per_fold(out: dict[str, Any], per_fold: tuple[float, ...] | None) -> dict[str, Any]:
    if per_fold is not None:
        out["per_fold"] = list(per_fold)
    return out


@contract.register
def response_lambda(e: LambdaEstimate) -> dict[str, Any]:
    out = {
        "lambda": e.lam,
        "ci_low": e.ci_low,
        "ci_high": e.ci_high,
        "level": e.level,
        "ladder": e.ladder,
        "lr_p_value_identity": e.lr_p_identity,
        "lr_p_value_log": e.lr_p_log,
        "at_search_bound": e.at_bound,
        "source": e.source,
    }
    return _per_fold(out, e.per_fold)


@contract.register
def predictor_power(p: PowerSummary) -> dict[str, Any]:
    out = {
        "power": p.power,
        "std_error": p.std_error,
        "ci_low": p.ci_low,
        "ci_high": p.ci_high,
        "level": p.level,
        "ladder": p.ladder,
        "converged": p.converged,
        "iterations": p.iterations,
        "method": p.method,
        "source": p.source,
        "at_search_bound": p.at_bound,
    }
    return _per_fold(out, p.per_fold)


@contract.register
def ladder_reading(r: LadderReading) -> dict[str, Any]:
    head: dict[str, Any]
    if isinstance(r.estimate, LambdaEstimate):
        head = {"parameter": "response_lambda", "family": r.estimate.family}
        body = response_lambda(r.estimate)
    else:
        head = {"parameter": "predictor_power", "column": r.column}
        body = predictor_power(r.estimate)
    return head | body | {"read_as": r.read_as, "cv_value_estimated": r.cv_value_estimated}


@contract.register
def lambda_on_design(d: LambdaOnDesign) -> dict[str, Any]:
    return {"design": d.design} | response_lambda(d.estimate)


@contract.register
def box_cox(r: BoxCoxReport) -> dict[str, Any]:
    out = lambda_on_design(r.reported)
    if r.on_rank_1_design is not None:
        out |= {"on_rank_1_design": lambda_on_design(r.on_rank_1_design), "context": r.context}
    return out


@contract.register
def screened_power(s: ScreenedPower) -> dict[str, Any]:
    return {"response_transform": s.response_transform.to_dict()} | predictor_power(s.estimate)
