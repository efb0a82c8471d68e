"""A table's shape read before parsing (service/api/intake.py) and the size checks on it
(service/api/options.check_table).

Reference: Python's csv module for the rows and header of CSV text; the contract's three
layouts of the same table must measure alike.
"""

from __future__ import annotations

import csv
import io

import pytest
from service.api.intake import MAX_NAME_CHARS, table_shape
from service.api.options import check_table
from service.api.pointers import pointer_of
from service.core.errors import InputError

COLS = {"cost": [1.0, 2.0, 3.0], "age": [4, 5, 6]}
RECS = [{"cost": 1.0, "age": 4}, {"cost": 2.0, "age": 5}, {"cost": 3.0, "age": 6}]
# a table one row and one column past the smallest limits the settings allow (10 and 2)
WIDE = {f"c{j}": [float(i) for i in range(11)] for j in range(3)}
WIDE_RECS = [{k: v[i] for k, v in WIDE.items()} for i in range(11)]


@pytest.mark.parametrize(
    "text",
    ["cost,age\n1,4\n2,5\n3,6\n", "cost,age\n1,4\n2,5\n3,6", 'cost,"a,ge"\n1,4\n2,5\n3,6\n'],
)
def test_csv_shape_agrees_with_the_csv_module(text):
    rows = list(csv.reader(io.StringIO(text)))  # source: Python's csv module
    assert table_shape({"csv": text}) == (len(rows) - 1, rows[0])


def test_the_three_layouts_measure_alike():
    text = "cost,age\n1,4\n2,5\n3,6\n"
    assert table_shape({"columns": COLS}) == table_shape({"records": RECS}) == (3, ["cost", "age"])
    assert check_table({"csv": text}) == 3


@pytest.mark.parametrize(
    "data, where",
    [({"columns": WIDE}, "/data/columns"), ({"records": WIDE_RECS}, "/data/records")],
)
def test_limits_name_their_setting(env, data, where):
    env(max_rows=10)
    with pytest.raises(InputError) as exc:
        check_table(data)
    assert (
        pointer_of(exc.value.problems[0].where) == "/data"
        and "BESTSCALE_MAX_ROWS" in exc.value.detail
    )
    env(max_rows=100, max_table_columns=2)
    with pytest.raises(InputError) as exc:
        check_table(data)
    assert pointer_of(exc.value.problems[0].where) == where
    assert "BESTSCALE_MAX_TABLE_COLUMNS" in exc.value.detail


def test_an_overlong_column_name_is_refused():
    name = "c" * (MAX_NAME_CHARS + 1)
    with pytest.raises(InputError, match=f"has {MAX_NAME_CHARS + 1} characters"):
        check_table({"columns": {name: [1.0], "x": [2.0]}})
    check_table({"columns": {"c" * MAX_NAME_CHARS: [1.0], "x": [2.0]}})
