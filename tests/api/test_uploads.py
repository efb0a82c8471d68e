"""POST /v1/selections with multipart/form-data: a CSV or Parquet file plus the options as JSON.

The reference for an upload is the same request sent as JSON: the numbers must be identical.
Files are written with the csv module and pyarrow (the Parquet reference implementation).
"""

from __future__ import annotations

import csv
import io
import json

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq

URL = "/v1/selections"
PROBLEM = "application/problem+json"


def _table(n: int = 60, seed: int = 4) -> dict:
    """Invented water-main repairs: cost grows with length on a log scale; two soils."""
    rng = np.random.default_rng(seed)
    length = rng.uniform(20, 400, n).round(2)
    age = rng.integers(2, 60, n).astype(float)
    soil = np.where(rng.uniform(0, 1, n) < 0.5, "clay", "loam")
    cost = np.exp(
        4.0 + 0.5 * np.log(length) + 0.01 * age + 0.2 * (soil == "clay") + rng.normal(0, 0.2, n)
    ).round(2)
    return {
        "repair_cost": cost.tolist(),
        "pipe_length_m": length.tolist(),
        "pipe_age_years": age.tolist(),
        "soil": soil.tolist(),
    }


OPTIONS = {
    "response": "repair_cost",
    "predictors": ["pipe_length_m", "pipe_age_years", "soil"],
    "transforms": {"response": ["identity", "log"], "predictors": ["identity", "log"]},
    "top": 2,
}


def _csv_bytes(cols: dict) -> bytes:
    buf = io.StringIO()
    w = csv.writer(buf)
    names = list(cols)
    w.writerow(names)
    for row in zip(*cols.values(), strict=True):
        w.writerow(["" if v is None else v for v in row])
    return buf.getvalue().encode()


def _parquet_bytes(cols: dict) -> bytes:
    buf = io.BytesIO()
    pq.write_table(pa.table(cols), buf)
    return buf.getvalue()


def _post_upload(
    client, raw: bytes, name: str, options: dict | str | None = OPTIONS, extra: dict | None = None
):
    files = {"file": (name, raw, "application/octet-stream")}
    data = {}
    if options is not None:
        data["options"] = options if isinstance(options, str) else json.dumps(options)
    data.update(extra or {})
    return client.post(URL, files=files, data=data)


def _key(body: dict):
    return [(e["equation"], e["cv"]["value"], e["cv"]["std_error"]) for e in body["ranking"]]


def test_csv_upload_equals_the_json_request(client):
    cols = _table()
    ref = client.post(URL, json={**OPTIONS, "data": {"columns": cols}})
    assert ref.status_code == 200, ref.text[:300]
    up = _post_upload(client, _csv_bytes(cols), "repairs.csv")
    assert up.status_code == 200, up.text[:300]
    # source: the same request as JSON (the contract's columns layout)
    assert _key(up.json()) == _key(ref.json())
    assert up.json()["data"] == ref.json()["data"]


def test_parquet_upload_equals_the_json_request_and_reports_missing_rows(client):
    cols = _table(seed=9)
    cols["pipe_age_years"][5] = None
    cols["repair_cost"][11] = float("nan")  # NaN in a Parquet float column: a missing value
    ref_cols = dict(cols)
    ref_cols["repair_cost"] = [
        None if (isinstance(v, float) and v != v) else v for v in cols["repair_cost"]
    ]
    ref = client.post(URL, json={**OPTIONS, "data": {"columns": ref_cols}})
    assert ref.status_code == 200, ref.text[:300]
    up = _post_upload(client, _parquet_bytes(cols), "repairs.parquet")
    assert up.status_code == 200, up.text[:300]
    body = up.json()
    # source: the same request as JSON with nulls in place of the missing cells
    assert _key(body) == _key(ref.json())
    assert body["data"]["rows_dropped"] == 2
    # positions 5 and 11 are rows 6 and 12: rows are numbered from 1
    assert sorted(d["row"] for d in body["data"]["dropped"]) == [6, 12]


def test_parquet_is_recognised_by_its_magic_bytes_whatever_the_name(client):
    cols = _table(seed=2)
    a = _post_upload(client, _parquet_bytes(cols), "upload.bin")
    b = client.post(URL, json={**OPTIONS, "data": {"columns": cols}})
    assert a.status_code == 200 and _key(a.json()) == _key(b.json())


def _assert_problem(r, status: int, pointer: str):
    assert r.status_code == status, r.text[:300]
    assert r.headers["content-type"].split(";")[0] == PROBLEM
    p = r.json()
    assert p["status"] == status and p["detail"]
    assert p["errors"][0]["pointer"] == pointer, p["errors"]


def test_missing_file_part(client):
    r = client.post(
        URL, data={"options": json.dumps(OPTIONS)}, files={"other": ("x.txt", b"abc", "text/plain")}
    )
    _assert_problem(r, 422, "/other")
    r = client.post(
        URL, files={"options": ("o.json", json.dumps(OPTIONS).encode(), "application/json")}
    )
    _assert_problem(r, 422, "/file")


def test_options_that_are_not_json_are_400(client):
    _assert_problem(
        _post_upload(client, _csv_bytes(_table()), "t.csv", options="{nope"), 400, "/options"
    )
    _assert_problem(
        _post_upload(client, _csv_bytes(_table()), "t.csv", options="[1, 2]"), 400, "/options"
    )
    _assert_problem(
        _post_upload(
            client,
            _csv_bytes(_table()),
            "t.csv",
            options='{"response": "repair_cost", "alpha": NaN}',
        ),
        400,
        "/options",
    )


def test_data_in_the_options_conflicts_with_the_file(client):
    r = _post_upload(
        client, _csv_bytes(_table()), "t.csv", options={**OPTIONS, "data": {"csv": "a\n1\n"}}
    )
    _assert_problem(r, 422, "/options/data")


def test_bad_cell_in_an_uploaded_csv_points_at_the_csv(client):
    cols = _table()
    cols["pipe_age_years"][3] = "old"
    r = _post_upload(client, _csv_bytes(cols), "t.csv")
    _assert_problem(r, 422, "/data/csv")
    assert "line 5" in r.json()["detail"]


def test_invalid_options_point_into_the_options(client):
    r = _post_upload(client, _csv_bytes(_table()), "t.csv", options={**OPTIONS, "top": 0})
    _assert_problem(r, 422, "/top")


def test_unreadable_parquet_and_empty_file(client):
    _assert_problem(_post_upload(client, b"PAR1 not really", "t.parquet"), 422, "/file")
    _assert_problem(_post_upload(client, b"", "t.csv"), 422, "/file")


def test_infinity_in_a_parquet_column_is_refused(client):
    cols = _table()
    cols["pipe_length_m"][7] = float("inf")
    r = _post_upload(client, _parquet_bytes(cols), "t.parquet")
    _assert_problem(r, 422, "/data/columns/pipe_length_m/7")


def test_multipart_elsewhere_is_still_415(client):
    r = client.post("/v1/predictions", files={"file": ("t.csv", b"a\n1\n", "text/csv")})
    assert r.status_code == 415
