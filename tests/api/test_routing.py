"""Media types and uploaded files (service/api/routing.py).

References: RFC 8259 / RFC 6839 (application/json and any "+json" structured suffix are
JSON; parameters such as charset do not change the type); pyarrow (the Parquet reference
implementation) writes the files; a UTF-8 byte order mark is not part of CSV text.
"""

from __future__ import annotations

import io
import math

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from service.api.errors import ProblemError
from service.api.routing import _is_json, _main_type, table_from_file
from service.core.data import cell_values, prepare


@pytest.mark.parametrize(
    "ctype, is_json",
    [
        ("application/json", True),
        ("Application/JSON; charset=utf-8", True),
        ("application/merge-patch+json", True),  # source: RFC 6839 section 3.1, +json suffix
        ("application/problem+json", True),
        ("text/json-ish", False),
        ("multipart/form-data; boundary=x", False),
        ("", False),
    ],
)
def test_json_media_types(ctype, is_json):
    assert _is_json(ctype) is is_json


def test_main_type_drops_parameters():
    assert _main_type(" Multipart/Form-Data ; boundary=abc") == "multipart/form-data"


def _parquet(table: pa.Table) -> bytes:
    buf = io.BytesIO()
    pq.write_table(table, buf)  # source: pyarrow, the Parquet reference implementation
    return buf.getvalue()


def test_parquet_columns_become_the_columns_layout_with_nan_as_missing():
    table = pa.table(
        {
            "cost": pa.array([410.5, math.nan, 512.0]),
            "age": pa.array([3, 7, None], type=pa.int64()),
            "soil": pa.array(["clay", "sand", "clay"]).dictionary_encode(),
            "lined": pa.array([True, False, True]),
        }
    )
    data = table_from_file(_parquet(table), "repairs.bin")  # known by its magic bytes
    cols = data["columns"]
    # numeric columns arrive typed: float64 with NaN for a missing cell, and their cells
    np.testing.assert_array_equal(cols["cost"].values, [410.5, math.nan, 512.0])
    np.testing.assert_array_equal(cols["age"].values, [3.0, 7.0, math.nan])
    data = {"columns": {k: cell_values(v) for k, v in cols.items()}}
    assert data == {
        "columns": {
            "cost": [410.5, None, 512.0],
            "age": [3, 7, None],
            "soil": ["clay", "sand", "clay"],
            "lined": [True, False, True],
        }
    }


def test_parquet_columns_of_other_types_are_refused():
    table = pa.table({"when": pa.array([1, 2], type=pa.timestamp("s"))})
    with pytest.raises(ProblemError) as exc:
        table_from_file(_parquet(table), "t.parquet")
    assert exc.value.status == 422 and exc.value.errors[0]["pointer"] == "/file"
    with pytest.raises(ProblemError, match="not a readable Parquet"):
        table_from_file(b"PAR1 but not really", "x.parquet")


def test_csv_text_is_decoded_and_a_byte_order_mark_dropped():
    assert table_from_file("\ufeffcost,age\n1,2\n".encode(), "r.csv") == {"csv": "cost,age\n1,2\n"}
    with pytest.raises(ProblemError) as exc:
        table_from_file(b"cost,age\n\xff\xfe,2\n", "r.csv")
    assert "not UTF-8" in exc.value.detail


def test_decoded_parquet_columns_prepare_as_their_cells_do():
    """Typed columns (float64 arrays) and the same cells as Python lists give the same
    prepared rows: numeric predictors, an integer column listed as categorical (levels
    from the exact integers, beyond 2^53 too), the order and group columns, missing rows."""
    big = 2**53 + 1
    table = pa.table(
        {
            "y": pa.array([1.5, 2.0, math.nan, 4.0, 3.5, 2.5]),
            "x": pa.array([1.0, 2.0, 3.0, None, 5.0, 6.0], type=pa.float32()),
            "code": pa.array([big, 1, big, 1, 1, big], type=pa.int64()),
            "t": pa.array([6, 5, 4, 3, 2, 1], type=pa.int16()),
            "g": pa.array([1, 1, 1, 2, 2, 2], type=pa.uint8()),
        }
    )
    decoded = table_from_file(_parquet(table), "t.parquet")
    cells = {"columns": {k: cell_values(v) for k, v in decoded["columns"].items()}}
    # source: the JSON request's path (Python values per cell) on the same cells
    for args in (
        {"predictors": ["x", "code"], "categorical": ["code"], "order": "t"},
        {"predictors": ["x", "t"], "group_by": "g"},
    ):
        a, b = prepare(decoded, "y", **args), prepare(cells, "y", **args)
        np.testing.assert_array_equal(a.y, b.y)
        assert a.numeric.keys() == b.numeric.keys()
        for k in a.numeric:
            np.testing.assert_array_equal(a.numeric[k], b.numeric[k])
        for k in a.categorical:
            assert a.categorical[k].tolist() == b.categorical[k].tolist()
        assert a.dropped == b.dropped and a.rows_dropped == b.rows_dropped
        np.testing.assert_array_equal(a.row_ids, b.row_ids)
        for u, v in ((a.order, b.order), (a.groups, b.groups)):
            assert (u is None) == (v is None)
            if u is not None:
                assert u.tolist() == v.tolist()
    assert prepare(decoded, "y", ["x", "code"], ["code"]).categorical["code"][0] == str(big)
