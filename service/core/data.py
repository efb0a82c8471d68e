"""Intake: turn the caller's table (columns, records or CSV) into typed arrays.

Only the columns a request uses are parsed.  Numbers stay numbers; a column
of strings is categorical; a numeric column holding a stray string is an
error that points at the cell, because guessing would silently change the
model.  Rows with a missing value in a used column are dropped and listed.
"""

from __future__ import annotations

import csv
import hashlib
import io
import math
from collections import Counter
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any, cast

import numpy as np

from .errors import (
    Categorical,
    Cell,
    DataColumn,
    DataRow,
    FieldProblem,
    InputError,
    Option,
    Predictor,
    Predictors,
    Response,
    Table,
)
from .numbers import row_number, rows_named

DROPPED_LIST_CAP = 100
PROBLEMS_LISTED = 20  # field problems listed in one error
LENGTHS_LISTED = 10  # column lengths quoted in the unequal-lengths message
MAX_LEVEL_CHARS = 256  # a categorical level or group value, like a column name
SHOWN_CHARS = 60  # a caller's value quoted in a message is cut to this many characters


def shown(v: object) -> str:
    """``repr`` of a caller's value for a message, cut so an error never echoes megabytes."""
    if isinstance(v, str) and len(v) > SHOWN_CHARS:
        return repr(v[:SHOWN_CHARS]) + f"... ({len(v)} characters)"
    return repr(v)


_MISSING_KEY = object()
_NUMBER_TYPES = frozenset({int, float, type(None)})  # exact types: bool is not a number here
_NON_FINITE_WORDS = {
    "nan",
    "+nan",
    "-nan",
    "inf",
    "+inf",
    "-inf",
    "infinity",
    "+infinity",
    "-infinity",
}


class NumberColumn:
    """A numeric column decoded from a typed file (an uploaded Parquet file): its values
    as float64 with NaN for a missing value, read without a Python object per cell, and
    ``cells()``, the values as the file holds them (``None`` for a missing value), for
    the paths that need each one (levels of a categorical predictor, group values, the
    cell an error names)."""

    __slots__ = ("cells", "values")

    def __init__(self, values: np.ndarray, cells: Callable[[], list[Any]]):
        self.values = values
        self.cells = cells

    def __len__(self) -> int:
        return int(self.values.size)


class DecodedColumns(dict[str, "list[Any] | NumberColumn"]):
    """The ``columns`` of a table decoded from a typed file: numeric columns as
    :class:`NumberColumn`, the others as lists of Python values."""


def cell_values(values: list[Any] | NumberColumn) -> list[Any]:
    """A column's values one Python object per cell."""
    return values.cells() if isinstance(values, NumberColumn) else values


@dataclass
class RawColumn:
    """One column as received: Python values with ``None`` for missing (or, from a typed
    file, a :class:`NumberColumn`)."""

    name: str
    values: list[Any] | NumberColumn
    layout: str  # how the table was sent: columns | records | csv

    @property
    def from_csv(self) -> bool:
        return self.layout == "csv"

    def cell(self, i: int) -> Cell:
        """The location of row ``i`` (0-based position in the request's data)."""
        return Cell(self.name, i, self.layout)


@dataclass
class RawTable:
    n_rows: int
    names: list[str]
    get: Callable[[str], RawColumn]  # name -> RawColumn
    source: str


def read_table(data: dict[str, Any]) -> RawTable:
    """``data`` is the contract's Data object, already a dict with exactly one key."""
    if "columns" in data and data["columns"] is not None:
        return _from_columns(data["columns"])
    if "records" in data and data["records"] is not None:
        return _from_records(data["records"])
    if "csv" in data and data["csv"] is not None:
        return _from_csv(data["csv"])
    raise InputError.at(Table(), "data needs exactly one of 'columns', 'records' or 'csv'")


def _from_columns(cols: dict[str, Any]) -> RawTable:
    if not cols:
        raise InputError.at(
            Table("columns"),
            "data.columns is empty; send at least the response and one predictor column",
        )
    lengths = {k: len(v) for k, v in cols.items()}
    longest = max(lengths, key=lengths.__getitem__)  # once: the check stays linear in the columns
    n = lengths[longest]
    bad = [k for k, ln in lengths.items() if ln != n]
    if bad:
        first = next(iter(lengths))
        problems = [
            FieldProblem(
                DataColumn(k, "columns"),
                f"column '{k}' has {lengths[k]} values but column '{longest}' has {n}",
            )
            for k in bad[:PROBLEMS_LISTED]
        ]
        shown = ", ".join(f"{k}: {v}" for k, v in list(lengths.items())[:LENGTHS_LISTED])
        more = (
            f" and {len(lengths) - LENGTHS_LISTED} more columns"
            if len(lengths) > LENGTHS_LISTED
            else ""
        )
        raise InputError(
            f"columns have unequal lengths ({shown}{more}; {len(bad)} differ from the longest); "
            f"every column needs one value per row (first column '{first}')",
            problems,
        )

    def get(name: str) -> RawColumn:
        return RawColumn(name, cols[name], "columns")

    return RawTable(n, list(cols), get, "columns")


def _from_records(recs: list[Any]) -> RawTable:
    names: list[str] = []
    seen: set[str] = set()
    for i, r in enumerate(recs):
        if not isinstance(r, dict):
            raise InputError.at(
                DataRow(i, "records"),
                f"{rows_named([i])} is not an object of column: value pairs",
            )
        for k in r:
            if k not in seen:
                seen.add(k)
                names.append(k)

    def get(name: str) -> RawColumn:
        vals = [r.get(name, _MISSING_KEY) for r in recs]
        for i, v in enumerate(vals):
            if v is _MISSING_KEY:
                raise InputError.at(
                    DataRow(i, "records"),
                    f"{rows_named([i])} has no field '{name}'; send null for a missing value",
                )
        return RawColumn(name, vals, "records")

    return RawTable(len(recs), names, get, "records")


def _from_csv(text: str) -> RawTable:
    if not text.strip():
        raise InputError.at(Table("csv"), "data.csv is empty; it needs a header row and data rows")
    try:
        dialect_rows = list(csv.reader(io.StringIO(text)))
    except csv.Error as exc:
        raise InputError.at(Table("csv"), f"data.csv cannot be read as CSV: {exc}") from None
    rows = [r for r in dialect_rows if r]  # blank lines carry no row
    header = [h.strip() for h in rows[0]]
    if len(set(header)) != len(header):
        counts = Counter(header)  # linear: no count() per name
        dup = sorted(h for h, c in counts.items() if c > 1)
        shown = dup[:PROBLEMS_LISTED]
        more = f" and {len(dup) - len(shown)} more" if len(dup) > len(shown) else ""
        raise InputError.at(
            Table("csv"),
            f"data.csv header repeats column {'name' if len(dup) == 1 else 'names'} {shown}{more}; "
            "names must be unique",
        )
    if any(h == "" for h in header):
        raise InputError.at(Table("csv"), "data.csv header has an empty column name")
    body = rows[1:]
    for i, r in enumerate(body):
        if len(r) != len(header):
            raise InputError.at(
                Table("csv"),
                f"data.csv data row {row_number(i)} (line {i + 2}) has {len(r)} "
                f"fields but the header has {len(header)}",
            )
    idx = {h: j for j, h in enumerate(header)}

    def get(name: str) -> RawColumn:
        j = idx[name]
        vals = [(r[j].strip() or None) for r in body]
        return RawColumn(name, vals, "csv")

    return RawTable(len(body), header, get, "csv")


# ------------------------------------------------------------------ typing
@dataclass
class TypedColumn:
    name: str
    kind: str  # "numeric" | "categorical"
    values: np.ndarray  # float64 (nan = missing) or object array of str (None = missing)
    missing: np.ndarray  # bool


def _csv_where(col: RawColumn, i: int) -> str:
    return f"data row {row_number(i)} (line {i + 2}), column '{col.name}'"


def _bad_numeric(col: RawColumn, i: int, v: object, role: str) -> InputError:
    where = _csv_where(col, i) if col.from_csv else rows_named([i])
    hint = "send null (or an empty CSV cell) for a missing value"
    if role == "predictor":
        hint += f", or list '{col.name}' in 'categorical' if it is a grouping"
    return InputError.at(
        col.cell(i),
        f"{role} column '{col.name}' is numeric but {where} holds {shown(v)}; {hint}",
    )


def _to_float(v: object) -> float | None:
    """A JSON or CSV value as a finite float, ``None`` when it is not one."""
    if isinstance(v, bool):
        return None
    if isinstance(v, (int, float)):
        try:
            f = float(v)
        except OverflowError:
            return None
        return f if math.isfinite(f) else None
    if isinstance(v, str):
        s = v.strip()
        # Python's float() also takes digit groupings ("1_000") and digits of other scripts;
        # a CSV reader does not, and reading them as numbers would change the caller's value
        if s.lower() in _NON_FINITE_WORDS or "_" in s or not s.isascii():
            return None
        try:
            f = float(s)
        except ValueError:
            return None
        return f if math.isfinite(f) else None
    return None


def _is_number_like(v: object, from_csv: bool) -> bool:
    if v is None:
        return True
    if from_csv:
        return _to_float(v) is not None
    return isinstance(v, (int, float)) and not isinstance(v, bool)


def as_numeric(col: RawColumn, role: str) -> TypedColumn:
    if isinstance(col.values, NumberColumn):
        decoded = col.values.values
        if not np.any(np.isinf(decoded)):
            return TypedColumn(col.name, "numeric", decoded, np.isnan(decoded))
    vals = cell_values(col.values)  # an infinite value: the cell-by-cell path names it
    if not col.from_csv and set(map(type, vals)) <= _NUMBER_TYPES:
        try:
            arr = np.array(vals, dtype=float)
        except OverflowError:
            arr = None
        if arr is not None and not np.any(np.isinf(arr)):
            missing = np.isnan(arr)
            return TypedColumn(col.name, "numeric", arr, missing)
    out = np.empty(len(vals))
    missing = np.zeros(len(vals), dtype=bool)
    for i, v in enumerate(vals):
        if v is None:
            out[i] = np.nan
            missing[i] = True
            continue
        if not col.from_csv and not _is_number_like(v, False):
            raise _bad_numeric(col, i, v, role)
        f = _to_float(v)
        if f is None:
            raise _bad_numeric(col, i, v, role)
        out[i] = f
    return TypedColumn(col.name, "numeric", out, missing)


def _level_text(v: object) -> str:
    if isinstance(v, bool):
        return "true" if v else "false"
    if isinstance(v, float) and v.is_integer():
        return str(int(v))
    return str(v)


def as_categorical(col: RawColumn) -> TypedColumn:
    cells = cell_values(col.values)
    vals = np.empty(len(cells), dtype=object)
    missing = np.zeros(len(cells), dtype=bool)
    for i, v in enumerate(cells):
        if v is None:
            missing[i] = True
            vals[i] = None
        elif isinstance(v, (dict, list)):
            raise InputError.at(
                col.cell(i),
                f"column '{col.name}' {rows_named([i])} holds a "
                "nested object; cells must be numbers, strings, booleans or null",
            )
        else:
            text = _level_text(v)
            if len(text) > MAX_LEVEL_CHARS:
                where = _csv_where(col, i) if col.from_csv else rows_named([i])
                raise InputError.at(
                    col.cell(i),
                    f"column '{col.name}' {where} holds a level of {len(text)} characters; "
                    f"levels (and group values) may have at most {MAX_LEVEL_CHARS}; "
                    "use a short code for each level",
                )
            vals[i] = text
    return TypedColumn(col.name, "categorical", vals, missing)


def infer_predictor(col: RawColumn, forced_categorical: bool) -> TypedColumn:
    if forced_categorical:
        return as_categorical(col)
    if isinstance(col.values, NumberColumn) or (
        not col.from_csv and set(map(type, col.values)) <= _NUMBER_TYPES
    ):
        # numbers and nulls only (the common case): numeric without a Python-level pass
        return as_numeric(col, "predictor")
    cells = cell_values(col.values)
    numbers = strings = 0
    first_string = first_number = None
    for i, v in enumerate(cells):
        if v is None:
            continue
        if _is_number_like(v, col.from_csv):
            numbers += 1
            if first_number is None:
                first_number = i
        else:
            strings += 1
            if first_string is None:
                first_string = i
    if strings and numbers:
        i = cast(int, first_string if strings <= numbers else first_number)  # both were seen
        where = _csv_where(col, i) if col.from_csv else rows_named([i])
        raise InputError.at(
            col.cell(i),
            (
                f"predictor column '{col.name}' mixes numbers ({numbers}) and text ({strings}); "
                f"{where} holds {shown(cells[i])}. Send null for a missing value, or list "
                f"'{col.name}' in 'categorical' to treat every value as a level"
            ),
        )
    if strings:
        return as_categorical(col)
    return as_numeric(col, "predictor")


# ------------------------------------------------------------------ prepare
@dataclass(frozen=True)
class DroppedRow:
    """A row left out for a missing value: its number as the caller counts rows (from 1)
    and which used columns were missing."""

    row: int
    reason: str


@dataclass(frozen=True)
class DataSummary:
    """Rows received, used and dropped, and the first dropped rows (at most
    ``DROPPED_LIST_CAP``)."""

    rows_received: int
    rows_used: int
    rows_dropped: int
    dropped: tuple[DroppedRow, ...]


@dataclass
class Prepared:
    """The rows a request uses, after missing values are dropped."""

    response: str
    y: np.ndarray
    predictors: list[str]
    numeric: dict[str, np.ndarray]
    categorical: dict[str, np.ndarray]  # object arrays of level strings
    row_ids: np.ndarray  # 0-based positions of the used rows in the request's data
    order: np.ndarray | None  # permutation putting used rows in the order column's order
    rows_received: int
    dropped: list[DroppedRow] = field(default_factory=list)
    rows_dropped: int = 0
    table_columns: tuple[str, ...] = ()
    order_values: np.ndarray | None = None  # the order column on the used rows
    groups: np.ndarray | None = None  # group_by labels on the used rows
    source: str = ""  # layout of the request's table: columns | records | csv

    @property
    def row_numbers(self) -> np.ndarray:
        """The used rows' numbers as people see them (1 = first data row, ``ROW_RULE``)."""
        return np.asarray(self.row_ids, dtype=np.int64) + 1

    def cell(self, column: str, i: int) -> Cell:
        """The location of used row ``i`` of ``column`` in the request's data."""
        return Cell(column, int(self.row_ids[i]), self.source)

    def table(self) -> Table:
        """The location of the table as the request sent it."""
        return Table(self.source if self.source in ("columns", "records", "csv") else "")

    @property
    def n(self) -> int:
        return int(self.y.size)

    def fingerprint(self) -> str:
        h = hashlib.sha256()
        h.update(self.y.tobytes())
        for name in self.predictors:
            if name in self.numeric:
                h.update(name.encode() + b"\0" + self.numeric[name].tobytes())
            else:
                h.update(name.encode() + b"\0" + "\x1f".join(self.categorical[name]).encode())
        return h.hexdigest()

    def take(self, rows: np.ndarray) -> Prepared:
        """The rows at positions ``rows`` (sorted, distinct) as a table of their own: a
        group's segment (:func:`split_groups`) or a resampling's part (nested
        cross-validation).  Built by :func:`segment_of`, so the order is the order
        column's over these rows and the group labels are left behind."""
        return segment_of(
            self.response,
            list(self.predictors),
            self.y[rows],
            {k: v[rows] for k, v in self.numeric.items()},
            {k: v[rows] for k, v in self.categorical.items()},
            self.row_ids[rows],
            self.order_values[rows] if self.order_values is not None else None,
            self.table_columns,
            self.source,
        )

    def data_summary(self) -> DataSummary:
        return DataSummary(self.rows_received, self.n, self.rows_dropped, tuple(self.dropped))


def prepare(
    data: dict[str, Any],
    response: str,
    predictors: list[str],
    categorical: list[str] | None = None,
    order: str | None = None,
    group_by: str | None = None,
) -> Prepared:
    """Parse, type and clean the columns a request uses.

    Raises :class:`InputError` naming the place (:mod:`errors` locations) of every problem a caller
    can fix: unknown or repeated columns, unequal lengths, non-numeric values in
    a numeric column, a constant response, too few rows.
    """
    categorical = list(categorical or [])
    table = read_table(data)
    known = set(table.names)
    problems = []
    if response not in known:
        problems.append(
            FieldProblem(
                Response(),
                f"response column '{response}' is not in the data (columns: {_names(table.names)})",
            )
        )
    if not predictors:
        problems.append(FieldProblem(Predictors(), "predictors needs at least one column"))
    seen = set()
    predictor_set = set(predictors)  # membership tests stay linear in the request
    for i, p in enumerate(predictors):
        if p not in known:
            problems.append(
                FieldProblem(
                    Predictor(i),
                    f"predictor column '{p}' is not in the data (columns: {_names(table.names)})",
                )
            )
        if p == response:
            problems.append(
                FieldProblem(
                    Predictor(i),
                    f"'{p}' is the response; it cannot also be a predictor",
                )
            )
        if p in seen:
            problems.append(FieldProblem(Predictor(i), f"predictor '{p}' is listed twice"))
        seen.add(p)
    for i, c in enumerate(categorical):
        if c not in predictor_set:
            problems.append(
                FieldProblem(
                    Categorical(i),
                    f"categorical column '{c}' is not one of the predictors",
                )
            )
    if group_by is not None:
        if group_by not in known:
            problems.append(
                FieldProblem(Option("group_by"), f"group_by column '{group_by}' is not in the data")
            )
        elif group_by in (response, order) or group_by in predictor_set:
            problems.append(
                FieldProblem(
                    Option("group_by"),
                    f"group_by column '{group_by}' is also used "
                    "in the model; give a separate segment column",
                )
            )
    if order is not None:
        if order not in known:
            problems.append(
                FieldProblem(Option("order"), f"order column '{order}' is not in the data")
            )
        elif order == response or order in predictor_set:
            problems.append(
                FieldProblem(
                    Option("order"),
                    f"order column '{order}' is also used in the "
                    "model; give a separate time or sequence column",
                )
            )
    if problems:
        raise InputError(
            problems[0].detail
            if len(problems) == 1
            else f"{len(problems)} problems with the requested columns",
            problems,
        )

    ycol = as_numeric(table.get(response), "response")
    typed = [infer_predictor(table.get(p), p in categorical) for p in predictors]
    ocol = None
    if order is not None:
        raw = table.get(order)
        try:
            ocol = as_numeric(raw, "order")
        except InputError:
            ocol = as_categorical(raw)

    gcol = as_categorical(table.get(group_by)) if group_by is not None else None
    n = table.n_rows
    missing = ycol.missing.copy()
    for t in typed:
        missing |= t.missing
    if ocol is not None:
        missing |= ocol.missing
    if gcol is not None:
        missing |= gcol.missing
    dropped: list[DroppedRow] = []
    n_dropped = int(missing.sum())
    if n_dropped:
        cols = [ycol] + typed + [c for c in (ocol, gcol) if c is not None]
        for i in np.flatnonzero(missing)[:DROPPED_LIST_CAP]:
            which = [c.name for c in cols if c.missing[i]]
            dropped.append(
                DroppedRow(row_number(i), "missing value in " + ", ".join(f"'{w}'" for w in which))
            )
    keep = ~missing
    row_ids = np.flatnonzero(keep)
    y = ycol.values[keep]
    numeric = {t.name: t.values[keep] for t in typed if t.kind == "numeric"}
    cats = {t.name: t.values[keep] for t in typed if t.kind == "categorical"}
    ov = ocol.values[keep] if ocol is not None else None
    prep = Prepared(
        response,
        y,
        list(predictors),
        numeric,
        cats,
        row_ids,
        _order_perm(ov),
        n,
        dropped,
        n_dropped,
        tuple(table.names),
        ov,
        gcol.values[keep] if gcol is not None else None,
    )
    prep.source = table.source
    if gcol is None:
        _check_content(prep)
    return prep


def _order_perm(ov: np.ndarray | None) -> np.ndarray | None:
    if ov is None:
        return None
    if ov.dtype != object:
        return np.argsort(ov, kind="stable")
    return np.array(sorted(range(ov.size), key=lambda i: ov[i]), dtype=int)


def segment_of(
    response: str,
    predictors: list[str],
    y: np.ndarray,
    numeric: dict[str, np.ndarray],
    categorical: dict[str, np.ndarray],
    row_ids: np.ndarray,
    order_values: np.ndarray | None,
    table_columns: tuple[str, ...],
    source: str,
) -> Prepared:
    """One segment's rows as a Prepared: what :meth:`Prepared.take` hands each group (and
    each part of a resampling), and what a batch worker rebuilds from the segment's Parquet
    file (the same constructor, so the two cannot drift apart)."""
    sub = Prepared(
        response,
        y,
        list(predictors),
        numeric,
        categorical,
        row_ids,
        _order_perm(order_values),
        int(y.size),
        [],
        0,
        tuple(table_columns),
        order_values,
        None,
    )
    sub.source = source
    return sub


def split_groups(prep: Prepared) -> dict[str, Prepared | InputError]:
    """One Prepared per value of the group column, in sorted order of the values.

    A group whose rows cannot be modelled (constant response, too few rows)
    maps to the :class:`InputError` that says why, so the other groups go on.
    """
    out: dict[str, Prepared | InputError] = {}
    if prep.groups is None:
        raise ValueError("split_groups needs a table prepared with group_by")
    for g in sorted(set(prep.groups.tolist())):
        sub = prep.take(np.flatnonzero(prep.groups == g))
        try:
            _check_content(sub)
            out[g] = sub
        except InputError as exc:
            out[g] = exc
    return out


def _names(names: list[str]) -> str:
    shown = ", ".join(f"'{n}'" for n in names[:20])
    return shown + (f", ... ({len(names)} in all)" if len(names) > 20 else "")


_MIN_SPREAD = 1e-150  # below this, squared deviations underflow double precision


def _tiny_spread(what: str, spread: float) -> str:
    return (
        f"{what} varies by only {spread:.3g} on the used rows, too little for sums of "
        "squares in double precision; rescale it (for example, change its unit)"
    )


def _check_content(p: Prepared) -> None:
    if p.n == 0:
        raise InputError.at(
            Table(),
            f"no row is complete: all {p.rows_received} rows have a missing value in a used column",
        )
    # relative to the values' size: data in small units (say 1e-13) still vary
    if np.ptp(p.y) <= 1e-12 * float(np.max(np.abs(p.y))):
        raise InputError.at(
            Response(),
            f"response '{p.response}' is constant ({p.y[0]:.6g}) on "
            "the used rows; there is nothing to model",
        )
    if np.ptp(p.y) < _MIN_SPREAD:
        raise InputError.at(Response(), _tiny_spread(f"response '{p.response}'", np.ptp(p.y)))
    for i, name in enumerate(p.predictors):
        if name in p.numeric:
            x = p.numeric[name]
            if np.ptp(x) <= 1e-12 * float(np.max(np.abs(x))):
                raise InputError.at(
                    Predictor(i),
                    f"predictor '{name}' is constant "
                    f"({x[0]:.6g}) on the used rows; it cannot be estimated "
                    "beside the intercept",
                )
            if np.ptp(x) < _MIN_SPREAD:
                raise InputError.at(Predictor(i), _tiny_spread(f"predictor '{name}'", np.ptp(x)))
        else:
            levels = set(p.categorical[name])
            if len(levels) < 2:
                raise InputError.at(
                    Predictor(i),
                    f"categorical predictor '{name}' has a single level on the used rows",
                )
