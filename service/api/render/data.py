"""Contract form of the rows a request used (``data``)."""

from __future__ import annotations

from typing import Any

from ...core.data import DataSummary, DroppedRow
from .registry import contract


@contract.register
def data_summary(d: DataSummary) -> dict[str, Any]:
    return {
        "rows_received": d.rows_received,
        "rows_used": d.rows_used,
        "rows_dropped": d.rows_dropped,
        "dropped": list(d.dropped),
        "dropped_listed": len(d.dropped),
    }


@contract.register
def dropped_row(r: DroppedRow) -> dict[str, Any]:
    return {"row": r.row, "reason": r.reason}
