"""A table's shape read before any cell is parsed, in time linear in the request.

Rows, total columns (used or not) and column names are read from the cheapest place each
layout offers -- the keys and list lengths of ``columns``, the keys of ``records`` (with an
early stop), the header line and the line count of ``csv`` -- so that ``options.check_table``
refuses an oversized table before it is typed, copied or decoded.
"""

from __future__ import annotations

import csv
import io
from collections.abc import Mapping
from typing import Any

from ..core.data import MAX_LEVEL_CHARS
from ..core.errors import InputError, Table

MAX_NAME_CHARS = MAX_LEVEL_CHARS  # a column name, like a level


def _csv_header(text: str) -> list[str]:
    """The header row of CSV text, read without reading the rest."""
    try:
        return next(csv.reader(io.StringIO(text)), [])
    except csv.Error as exc:
        raise InputError.at(Table("csv"), f"data.csv cannot be read as CSV: {exc}") from None


def table_shape(data: Mapping[str, Any], cap: int | None = None) -> tuple[int, list[str]]:
    """(rows, column names) of the contract's Data object; records stop reading names once
    there are more than ``cap`` (the table-column limit; None: read them all)."""
    if data.get("columns") is not None:
        cols = data["columns"]
        return max((len(v) for v in cols.values()), default=0), list(cols)
    if data.get("records") is not None:
        recs = data["records"]
        names: dict[str, None] = {}
        for r in recs:
            if isinstance(r, dict):
                names.update(dict.fromkeys(r))
                if cap is not None and len(names) > cap:
                    break
        return len(recs), list(names)
    text = data.get("csv") or ""
    rows = text.count("\n") + (0 if text.endswith("\n") else 1) - 1
    header = _csv_header(text)
    return max(rows, 0), header
