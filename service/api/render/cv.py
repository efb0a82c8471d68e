"""Contract form of a candidate's cross-validated error (an entry's ``cv``)."""

from __future__ import annotations

from typing import Any

from ...core.cvresult import CVReport, Metrics
from .registry import contract


@contract.register
def metrics(m: Metrics) -> dict[str, Any]:
    return {"rmse": m.rmse, "mae": m.mae, "mape": m.mape}


@contract.register
def cv(r: CVReport) -> dict[str, Any]:
    return {
        "metric": r.metric,
        "value": r.value,
        "std_error": r.std_error,
        "scale": "original",
        "folds": r.folds,
        "repeats": r.repeats,
        "seed": r.seed,
        "scheme": r.scheme,
        "all_metrics": metrics(r.all_metrics),
        "back_transform": r.back_transform,
    }
