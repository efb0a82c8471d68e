"""One row count everywhere: row 1 is the first data row of the request.

Every output that names a row (``data.dropped``, influence flags, plot labels, error messages,
prediction warnings) uses that count, and the OpenAPI document states it once where a row is
returned.  JSON Pointers keep their own 0-based array positions.
"""

from __future__ import annotations

import numpy as np
import pytest
from fastapi.testclient import TestClient
from service.app import app
from service.core.numbers import ROW_RULE, row_number, rows_named


@pytest.fixture(scope="module")
def client():
    with TestClient(app) as c:
        yield c


def _columns(n: int = 20, seed: int = 3) -> dict:
    rng = np.random.default_rng(seed)
    x = rng.uniform(1, 10, n)
    y = 2.0 + 0.8 * x + rng.normal(0, 0.5, n)
    return {"y": y.round(6).tolist(), "x": x.round(6).tolist()}


def _selection(data: dict) -> dict:
    return {
        "data": data,
        "response": "y",
        "predictors": ["x"],
        "transforms": {"response": ["identity"], "predictors": ["identity"]},
    }


def test_rule_and_helpers():
    assert row_number(0) == 1
    assert rows_named([3]) == "row 4 (counting from 1)"
    assert rows_named([0, 3, 8]) == "rows 1, 4 and 9 (counting from 1)"
    assert rows_named(range(9), 5) == "rows 1, 2, 3, 4, 5 and 4 more (counting from 1)"
    assert "numbered from 1" in ROW_RULE


def test_dropped_rows_agree_across_layouts(client):
    cols = _columns()
    cols["y"][0] = None  # the first data row
    cols["x"][9] = None
    as_columns = client.post("/v1/selections", json=_selection({"columns": cols})).json()
    records = [{"y": a, "x": b} for a, b in zip(cols["y"], cols["x"], strict=True)]
    as_records = client.post("/v1/selections", json=_selection({"records": records})).json()
    lines = ["y,x"] + [
        f"{'' if a is None else a},{'' if b is None else b}"
        for a, b in zip(cols["y"], cols["x"], strict=True)
    ]
    as_csv = client.post("/v1/selections", json=_selection({"csv": "\n".join(lines)})).json()
    for body in (as_columns, as_records, as_csv):
        assert [d["row"] for d in body["data"]["dropped"]] == [1, 10]


def test_cell_errors_name_the_row_counted_from_1(client):
    cols = _columns()
    cols["x"][4] = "oops"
    r = client.post("/v1/selections", json=_selection({"columns": cols}))
    assert r.status_code == 422
    err = r.json()["errors"][0]
    assert err["pointer"] == "/data/columns/x/4"  # a JSON Pointer keeps its 0-based position
    assert "row 5 (counting from 1)" in err["detail"]
    records = [{"y": a, "x": b} for a, b in zip(cols["y"], cols["x"], strict=True)]
    del records[2]["x"]
    r = client.post("/v1/selections", json=_selection({"records": records}))
    err = r.json()["errors"][0]
    assert err["pointer"] == "/data/records/2"
    assert "row 3 (counting from 1)" in err["detail"]


def test_schema_errors_inside_a_data_row_name_the_row(client):
    records = [{"y": 1.0, "x": 2.0}] * 5 + [7]
    r = client.post("/v1/selections", json=_selection({"records": records}))
    assert r.status_code == 422
    err = next(e for e in r.json()["errors"] if e["pointer"] == "/data/records/5")
    assert "(row 6, counting from 1)" in err["detail"]


def test_requested_transform_outside_its_domain_names_the_row(client):
    cols = _columns()
    cols["x"][6] = -1.0
    body = _selection({"columns": cols})
    body["transforms"] = {"response": ["identity"], "predictors": ["log"]}
    body = {
        "data": {"columns": cols},
        "specification": {
            "response": {"column": "y", "transform": {"name": "identity"}},
            "predictors": [{"column": "x", "transform": {"name": "log"}}],
        },
    }
    r = client.post("/v1/diagnostics", json=body)
    assert r.status_code == 422, r.text[:300]
    err = r.json()["errors"][0]
    assert err["pointer"] == "/data/columns/x/6"
    assert "row 7 (counting from 1)" in err["detail"]


def test_prediction_warnings_count_rows_from_1(client):
    cols = _columns()
    sel = client.post("/v1/selections", json=_selection({"columns": cols})).json()
    model = sel["ranking"][0]["model"]
    new = {"columns": {"x": [5.0, 6.0, 500.0]}}  # the third row is far outside the data
    r = client.post("/v1/predictions", json={"model": model, "data": new})
    assert r.status_code == 200, r.text[:300]
    body = r.json()
    assert [p["extrapolation"] for p in body["predictions"]] == [False, False, True]
    assert any("extrapolation: row 3 (counting from 1)," in w for w in body["warnings"]), body[
        "warnings"
    ]
    r = client.post(
        "/v1/predictions", json={"model": model, "data": {"columns": {"x": [5.0, None]}}}
    )
    err = r.json()["errors"][0]
    assert err["pointer"] == "/data/columns/x/1" and "row 2 (counting from 1)" in err["detail"]


def test_openapi_states_the_rule_where_rows_are_returned(client):
    doc = client.get("/openapi.json").json()
    schemas = doc["components"]["schemas"]
    assert "numbered from 1" in doc["info"]["description"]
    assert "numbered from 1" in schemas["DataSummary"]["properties"]["dropped"]["description"]
    assert "numbered from 1" in schemas["FlaggedRowOut"]["properties"]["row"]["description"]
