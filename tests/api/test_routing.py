"""Media types and uploaded files (service/api/routing.py).

References: RFC 8259 / RFC 6839 (application/json and any "+json" structured suffix are
JSON; parameters such as charset do not change the type); pyarrow (the Parquet reference
implementation) writes the files; a UTF-8 byte order mark is not part of CSV text.
"""

from __future__ import annotations

import io
import math

import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from service.api.errors import ProblemError
from service.api.routing import _is_json, _main_type, table_from_file


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
