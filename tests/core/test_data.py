"""Intake of a caller's table (service/core/data.py): typing, dropped rows, errors.

References: pandas.read_csv for how the CSV text's numbers read (a general-purpose parser,
not ours); the three layouts (columns, records, CSV) of the same invented table must give
identical typed arrays; RFC 6901 JSON Pointers for the cells an error names.
"""

from __future__ import annotations

import io

import numpy as np
import pandas as pd
import pytest
from service.core.data import DROPPED_LIST_CAP, DroppedRow, prepare, split_groups
from service.core.errors import Categorical, Cell, InputError, Predictor, Response

# invented: repair cost of water mains by pipe age, material and district
COLUMNS = {
    "cost": [410.0, 388.5, None, 512.25, 1.5e3, 620.0, 299.0, 455.0],
    "age": [12, 7.5, 30, None, 41, 22, 3, 18],
    "material": ["iron", "pvc", "iron", "steel", "iron", None, "pvc", "steel"],
    "district": ["n", "n", "s", "s", "n", "s", "n", "s"],
}


def _records(cols):
    names = list(cols)
    return [{k: cols[k][i] for k in names} for i in range(len(cols[names[0]]))]


def _csv(cols):
    names = list(cols)
    lines = [",".join(names)]
    for r in _records(cols):
        lines.append(",".join("" if r[k] is None else str(r[k]) for k in names))
    return "\n".join(lines) + "\n"


def _prep(data, **kw):
    return prepare(data, "cost", ["age", "material"], **kw)


def test_three_layouts_give_the_same_typed_rows():
    a = _prep({"columns": COLUMNS})
    b = _prep({"records": _records(COLUMNS)})
    c = _prep({"csv": _csv(COLUMNS)})
    for p in (b, c):
        np.testing.assert_array_equal(p.y, a.y)
        np.testing.assert_array_equal(p.numeric["age"], a.numeric["age"])
        assert p.categorical["material"].tolist() == a.categorical["material"].tolist()
        assert p.row_ids.tolist() == a.row_ids.tolist() and p.fingerprint() == a.fingerprint()
    assert (a.source, b.source, c.source) == ("columns", "records", "csv")
    # a text column is categorical, a number column numeric
    assert set(a.numeric) == {"age"} and set(a.categorical) == {"material"}


# cells pandas reads as numbers, and cells it keeps as text (a grouping like "1_0", a hex
# code, digits of another script, a number with a space inside)
CSV_CELLS = [
    "1e3",
    "-2.5E-3",
    " 7",
    "+4",
    ".5",
    "3.",
    "0012",
    "1_0",
    "1_000",
    "0x10",
    "\u0661\u0662",
    "1 000",
]


@pytest.mark.parametrize("cell", CSV_CELLS)
def test_csv_cells_read_as_pandas_reads_them(cell):
    text = f"y,x\n1,{cell}\n2,3\n3,5\n"
    # source: pandas.read_csv (C parser) on the same text: a number, or text
    ref = pd.read_csv(io.StringIO(text))["x"]
    if pd.api.types.is_numeric_dtype(ref):
        p = prepare({"csv": text}, "y", ["x"])
        np.testing.assert_array_equal(p.numeric["x"], ref.to_numpy(float))
    else:  # text beside numbers: refused, pointing at the cell, never read as some number
        with pytest.raises(InputError, match="mixes numbers"):
            prepare({"csv": text}, "y", ["x"])


def test_rows_with_a_missing_used_value_are_dropped_and_listed():
    p = _prep({"columns": COLUMNS})
    assert p.rows_received == 8 and p.n == 5 and p.rows_dropped == 3
    # rows counted from 1: row 3 misses cost, row 4 age, row 6 material
    assert p.dropped == [
        DroppedRow(3, "missing value in 'cost'"),
        DroppedRow(4, "missing value in 'age'"),
        DroppedRow(6, "missing value in 'material'"),
    ]
    assert p.row_ids.tolist() == [0, 1, 4, 6, 7]  # positions in the request's arrays
    assert p.row_numbers.tolist() == [1, 2, 5, 7, 8]
    summary = p.data_summary()
    assert summary.rows_used + summary.rows_dropped == summary.rows_received
    # an unused column's gaps drop nothing
    q = prepare({"columns": {**COLUMNS, "note": [None] * 8}}, "cost", ["age", "material"])
    assert q.rows_dropped == 3


def test_dropped_list_is_capped_but_counted():
    n = DROPPED_LIST_CAP + 50
    y = [float(i) if i % 2 else None for i in range(2 * n)]
    x = [float(i % 7) for i in range(2 * n)]
    p = prepare({"columns": {"y": y, "x": x}}, "y", ["x"])
    assert p.rows_dropped == n and len(p.dropped) == DROPPED_LIST_CAP
    assert len(p.data_summary().dropped) == DROPPED_LIST_CAP


@pytest.mark.parametrize(
    "data, ptr",
    [
        ({"columns": {"cost": [1.0, "12 dollars", 3.0], "age": [1, 2, 3]}}, ("cost", 1, "columns")),
        ({"records": [{"cost": 1.0, "age": 1}, {"cost": True, "age": 2}]}, ("cost", 1, "records")),
        (
            {"columns": {"cost": [1.0, 2.0, 3.0], "age": [1, "two", "three", 4][:3]}},
            ("age", 0, "columns"),
        ),
        ({"csv": "cost,age\n1,2\nNaN,3\n"}, ("cost", 1, "csv")),
    ],
)
def test_a_stray_value_is_an_error_at_its_cell(data, ptr):
    with pytest.raises(InputError) as exc:
        prepare(data, "cost", ["age"])
    assert exc.value.problems[0].where == Cell(*ptr)


def test_request_column_problems_are_listed_together():
    with pytest.raises(InputError) as exc:
        prepare({"columns": COLUMNS}, "price", ["age", "age", "depth"], ["colour"])
    places = [p.where for p in exc.value.problems]
    assert places == [Response(), Predictor(1), Predictor(2), Categorical(0)]
    assert exc.value.detail == "4 problems with the requested columns"


def test_unequal_lengths_and_constant_response_are_refused():
    with pytest.raises(InputError, match="unequal lengths"):
        prepare({"columns": {"y": [1.0, 2.0], "x": [1.0]}}, "y", ["x"])
    with pytest.raises(InputError, match="constant") as exc:
        prepare({"columns": {"y": [5.0, 5.0, 5.0], "x": [1.0, 2.0, 3.0]}}, "y", ["x"])
    assert exc.value.problems[0].where == Response()


def test_order_column_gives_the_permutation_into_its_order():
    cols = {"y": [3.0, 1.0, 2.0, 5.0], "x": [1.0, 2.0, 4.0, 3.0], "t": [30, 10, 20, 40]}
    p = prepare({"columns": cols}, "y", ["x"], order="t")
    # source: numpy.argsort (stable) of the order column
    assert p.order.tolist() == np.argsort([30, 10, 20, 40], kind="stable").tolist()


def test_split_groups_keeps_good_groups_and_explains_bad_ones():
    cols = {
        "y": [1.0, 2.0, 3.0, 4.0, 7.0, 7.0, 7.0],
        "x": [1.0, 3.0, 2.0, 5.0, 1.0, 2.0, 3.0],
        "g": ["a", "a", "a", "a", "b", "b", "b"],
    }
    p = prepare({"columns": cols}, "y", ["x"], group_by="g")
    out = split_groups(p)
    assert list(out) == ["a", "b"]
    assert out["a"].row_ids.tolist() == [0, 1, 2, 3]
    assert isinstance(out["b"], InputError) and "constant" in out["b"].detail


def test_take_keeps_rows_their_cells_and_their_order():
    rng = np.random.default_rng(0)
    cols = {
        "y": rng.uniform(1, 2, 12).tolist(),
        "x": rng.uniform(1, 2, 12).tolist(),
        "t": rng.permutation(12).tolist(),
    }
    prep = prepare({"csv": pd.DataFrame(cols).to_csv(index=False)}, "y", ["x"], order="t")
    rows = np.array([0, 2, 3, 7, 8, 11])
    sub = prep.take(rows)
    # source: pandas .iloc of the same rows (a general-purpose table library)
    assert sub.y.tolist() == pd.DataFrame(cols).iloc[rows]["y"].tolist()
    assert sub.numeric["x"].tolist() == pd.DataFrame(cols).iloc[rows]["x"].tolist()
    # source: definition of an ordering: the subset's rows sorted by the order column
    # (numpy.argsort, stable)
    expected = np.argsort([cols["t"][i] for i in rows], kind="stable")
    assert sub.order.tolist() == expected.tolist()
    # a cell of the subset still names the request's row and layout
    assert sub.cell("x", 1) == Cell("x", 2, "csv")
    assert sub.n == sub.rows_received == rows.size and sub.groups is None


def test_take_of_a_group_is_the_segment_split_groups_gives():
    cols = {
        "y": [1.0, 2.0, 3.0, 4.0, 7.0, 5.0, 6.0],
        "x": [1.0, 3.0, 2.0, 5.0, 1.0, 2.0, 3.0],
        "g": ["a", "b", "a", "b", "a", "b", "a"],
    }
    p = prepare({"columns": cols}, "y", ["x"], group_by="g")
    seg = split_groups(p)["a"]
    # source: the rows whose group label is "a", read off the table above
    assert seg.row_ids.tolist() == [0, 2, 4, 6]
    assert seg.fingerprint() == p.take(np.array([0, 2, 4, 6])).fingerprint()
