"""Table size checks that run before any cell is parsed, in time linear in the request.

Rows, total columns (used or not) and column-name lengths are read from the cheapest place
each layout offers -- the keys and list lengths of ``columns``, the keys of ``records`` (with
an early stop), the header line and the line count of ``csv`` -- so an oversized table is
refused before it is typed, copied or decoded.
"""

from __future__ import annotations

import csv
import io

from ..core.data import MAX_LEVEL_CHARS, shown
from ..core.errors import InputError, Table
from ..settings import get_settings

MAX_NAME_CHARS = MAX_LEVEL_CHARS  # a column name, like a level


def _csv_header(text: str) -> list[str]:
    """The header row of CSV text, read without reading the rest."""
    try:
        return next(csv.reader(io.StringIO(text)), [])
    except csv.Error as exc:
        raise InputError.at(Table("csv"), f"data.csv cannot be read as CSV: {exc}") from None


def table_shape(data: dict) -> tuple[int, list[str]]:
    """(rows, column names) of the contract's Data object; records stop early past the cap."""
    cap = get_settings().max_table_columns
    if data.get("columns") is not None:
        cols = data["columns"]
        return max((len(v) for v in cols.values()), default=0), list(cols)
    if data.get("records") is not None:
        recs = data["records"]
        names: dict[str, None] = {}
        for r in recs:
            if isinstance(r, dict):
                names.update(dict.fromkeys(r))
                if len(names) > cap:
                    break
        return len(recs), list(names)
    text = data.get("csv") or ""
    rows = text.count("\n") + (0 if text.endswith("\n") else 1) - 1
    header = _csv_header(text)
    return max(rows, 0), header


def check_table(data: dict) -> int:
    """Refuse a table past the row or total-column limits or with an overlong column name;
    return its row count."""
    s = get_settings()
    rows, names = table_shape(data)
    where = Table(
        "columns"
        if data.get("columns") is not None
        else "records"
        if data.get("records") is not None
        else "csv"
    )
    if rows > s.max_rows:
        raise InputError.at(
            Table(),
            f"the table has {rows} rows; this service accepts at most "
            f"{s.max_rows} (setting BESTSCALE_MAX_ROWS)",
        )
    if len(names) > s.max_table_columns:
        more = "more than " if where.layout == "records" else ""
        raise InputError.at(
            where,
            f"the table has {more}{len(names)} columns; this service accepts at most "
            f"{s.max_table_columns} in a table, used or not (setting "
            "BESTSCALE_MAX_TABLE_COLUMNS); send only the columns the request uses",
        )
    for name in names:
        if len(name) > MAX_NAME_CHARS:
            raise InputError.at(
                where,
                f"column name {shown(name)} has {len(name)} characters; at most "
                f"{MAX_NAME_CHARS} are accepted",
            )
    return rows
