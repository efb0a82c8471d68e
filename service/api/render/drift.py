"""Contract form of the drift block (a batch segment's rows against its model artifact)."""

from __future__ import annotations

from typing import Any

from ...core import drift as d
from .registry import contract


def _shift(shift: d.Shift | None) -> dict[str, Any]:
    return {} if shift is None else {"psi": shift.psi, "shift": shift.grade}


@contract.register
def outside_range(o: d.OutsideRange) -> dict[str, Any]:
    return {
        "below": o.below,
        "above": o.above,
        "share": o.share,
        "now_min": o.now_min,
        "now_max": o.now_max,
    }


@contract.register
def numeric(c: d.NumericDrift) -> dict[str, Any]:
    out: dict[str, Any] = {
        "kind": "numeric",
        "training_min": c.training_min,
        "training_max": c.training_max,
    }
    if c.outside is not None:
        out["outside_range"] = contract(c.outside)
    if c.shift is not None:
        out.update(_shift(c.shift), median_then=c.median_then, median_now=c.median_now)
    return out


@contract.register
def categorical(c: d.CategoricalDrift) -> dict[str, Any]:
    return {
        "kind": "categorical",
        "new_levels": list(c.new_levels),
        "vanished_levels": list(c.vanished_levels),
        **_shift(c.shift),
    }


@contract.register
def missing(_: d.MissingColumn) -> dict[str, Any]:
    return {"kind": "missing"}


@contract.register
def response(r: d.ResponseDrift) -> dict[str, Any]:
    return {
        **_shift(r.shift),
        "median_then": r.median_then,
        "median_now": r.median_now,
        "mean_then": r.mean_then,
        "mean_now": r.mean_now,
    }


@contract.register
def report(r: d.DriftReport) -> dict[str, Any]:
    out: dict[str, Any] = {
        "rows": {"then": r.rows_then, "now": r.rows_now},
        "predictors": {column: contract(c) for column, c in r.predictors},
        "rule": d.RULE,
        "response": None if r.response is None else contract(r.response),
    }
    if r.note is not None:
        out["note"] = r.note
    out["flags"] = list(r.flags)
    out["flagged"] = r.flagged
    return out
