"""Contract form of predictions (``POST /v1/predictions``)."""

from __future__ import annotations

from typing import Any

import numpy as np

from ...core.predict import Predictions
from .registry import contract


def finite_list(a: np.ndarray) -> list[Any]:
    """Floats as a list, ``None`` where not finite (JSON has no NaN)."""
    a = np.asarray(a, dtype=float)
    bad = ~np.isfinite(a)
    if not bad.any():
        out: list[Any] = a.tolist()
        return out
    obj = a.astype(object)
    obj[bad] = None
    out = obj.tolist()
    return out


@contract.register
def predictions(p: Predictions) -> dict[str, Any]:
    cols = [
        finite_list(a)
        for a in (p.mean, p.median, p.lower, p.upper, p.leverage, p.eta, p.eta_lower, p.eta_upper)
    ]
    rows = [
        {
            "mean": c0,
            "median": c1,
            "lower": c2,
            "upper": c3,
            "extrapolation": bool(why),
            "extrapolation_reasons": list(why),
            "leverage": c4,
            "model_scale": {"mean": c5, "interval_low": c6, "interval_high": c7},
        }
        for why, c0, c1, c2, c3, c4, c5, c6, c7 in zip(p.extrapolation_reasons, *cols, strict=True)
    ]
    return {
        "predictions": rows,
        "interval": p.interval,
        "interval_method": p.method,
        "interval_method_reason": p.method_reason,
        "source": p.source,
        "warnings": list(p.warnings),
    }
