"""Contract form of the search's summary blocks."""

from __future__ import annotations

from typing import Any

from ...selection import search as s
from .registry import contract
from .specs import specification, transform


@contract.register
def band(b: s.BandReport) -> dict[str, Any]:
    return {
        "lowest_cv_value": b.band.lowest,
        "std_error_of_lowest": b.band.std_error,
        "threshold": b.band.threshold,
        "rule": s.BAND_RULE,
        "source": s.BAND_SOURCE,
        "conditions": {
            "members_compared": b.members_compared,
            "conditions_ordering": list(b.ordering),
            "alpha": b.alpha,
            "rule": s.BAND_CONDITIONS_RULE,
            "source": s.CONDITIONS_SOURCE,
        },
    }


@contract.register
def strategy(r: s.StrategyReport) -> dict[str, Any]:
    return {
        "name": r.name,
        "exhaustive_limit": r.exhaustive_limit,
        "description": r.description,
        "stopped_by": r.stopped_by,
    }


@contract.register
def failure_group(g: s.FailureGroup) -> dict[str, Any]:
    return {"reason": g.reason, "candidates": g.candidates, "wordings": g.wordings}


@contract.register
def failure(f: s.Failure) -> dict[str, Any]:
    return {"specification": specification(f.spec), "reason": f.reason}


@contract.register
def best_cv(b: s.BestCV) -> dict[str, Any]:
    return {"value": b.value, "std_error": b.std_error, "specification": specification(b.spec)}


@contract.register
def scales(d: s.ScalesSummary) -> dict[str, Any]:
    return {
        "read_as_ladder": d.read_as_ladder,
        "estimated_listed": d.estimated_listed,
        "estimated_not_listed": d.estimated_not_listed,
        "rule": s.SCALES_RULE,
    }


#: integers above this are written as the nearest float: about 27 predictors give a
#: candidate space past 2^63, which the JSON writer refuses, and no JSON reader keeps an
#: integer past 2^53 exact anyway
EXACT_INT = 2**53


def count(n: int) -> int | float:
    """A count as JSON carries it: exact up to :data:`EXACT_INT`, else the nearest float
    (still an integral number)."""
    return n if n <= EXACT_INT else float(n)


@contract.register
def search(r: s.SearchSummary) -> dict[str, Any]:
    out: dict[str, Any] = {
        "candidates_considered": count(r.considered),
        "candidates_scored": r.scored,
        "candidates_failed": r.failed,
        "candidates_screened": r.screened,
        "complete": r.complete,
        "elapsed_s": r.elapsed_s,
        "strategy": r.strategy,
        "response_transforms": [transform(t) for t in r.response_transforms],
        "predictor_transforms": {c: [transform(t) for t in ts] for c, ts in r.predictor_transforms},
        "best_cv": r.best_cv,
        "band": r.band,
        "distinct_scales": r.distinct_scales,
        "failures": list(r.failures),
        "failure_reasons": list(r.failure_reasons),
        "exact_refits": r.exact_refits,
    }
    if r.box_cox is not None:
        out["box_cox"] = r.box_cox
    if r.predictor_powers is not None:
        out["predictor_powers"] = r.predictor_powers
    return out
