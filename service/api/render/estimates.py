"""Contract form of an entry's fitted numbers: the coefficient table (``coefficients``),
one row per term with the classical inference and, suffixed by their kind (``_hc3``,
``_hac``), the inference under each robust covariance.

Numbers that are not finite are written as null, as everywhere in the contract.
"""

from __future__ import annotations

import math
from typing import Any

from ...core.fitting import CoefficientRow, Inference
from . import contract


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
