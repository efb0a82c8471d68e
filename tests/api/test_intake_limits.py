"""Size limits checked before parsing or decoding, the response cap, security headers on
non-JSON answers and caller text shown safely in the report and figures (in-process)."""

from __future__ import annotations

import io
import json

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from fastapi.testclient import TestClient
from service.settings import get_settings

from .abuse_harness import multipart


@pytest.fixture
def make_client(monkeypatch):
    def build(**env):
        for k, v in env.items():
            monkeypatch.setenv(f"BESTSCALE_{k.upper()}", str(v))
        get_settings.cache_clear()
        from service.app import create_app

        return TestClient(create_app(), raise_server_exceptions=False)

    yield build
    monkeypatch.undo()
    get_settings.cache_clear()


def _table(n: int = 40, seed: int = 2) -> dict:
    """Invented: kilowatt-hours of a cold store against outside temperature and door openings."""
    rng = np.random.default_rng(seed)
    temp = rng.uniform(5, 30, n)
    doors = rng.integers(10, 80, n).astype(float)
    kwh = np.exp(3 + 0.03 * temp + 0.004 * doors + rng.normal(0, 0.1, n))
    return {"kwh": kwh.tolist(), "temp": temp.tolist(), "doors": doors.tolist()}


def _problem(r, status: int) -> dict:
    assert r.status_code == status, (r.status_code, r.text[:400])
    body = r.json()
    assert body["status"] == status
    return body


def _pointers(body: dict) -> list[str]:
    return [e["pointer"] for e in body.get("errors", [])]


def test_total_columns_are_capped_before_parsing(make_client):
    c = make_client(max_table_columns=50)
    cols = _table()
    for j in range(60):
        cols[f"unused{j}"] = [None] * 40
    r = c.post(
        "/v1/selections",
        json={"data": {"columns": cols}, "response": "kwh", "predictors": ["temp"]},
    )
    body = _problem(r, 422)
    assert "BESTSCALE_MAX_TABLE_COLUMNS" in body["detail"] and "/data/columns" in _pointers(body)
    recs = [dict(zip(cols, row, strict=True)) for row in zip(*cols.values(), strict=True)]
    r = c.post(
        "/v1/selections",
        json={"data": {"records": recs}, "response": "kwh", "predictors": ["temp"]},
    )
    assert "/data/records" in _pointers(_problem(r, 422))


def test_overlong_column_name_is_refused(make_client):
    c = make_client()
    cols = {**_table(), "n" * 300: [1.0] * 40}
    r = c.post(
        "/v1/selections",
        json={"data": {"columns": cols}, "response": "kwh", "predictors": ["temp"]},
    )
    body = _problem(r, 422)
    assert "300 characters" in body["detail"]
    assert len(r.content) < 2000  # the name is not echoed whole


def test_diagnostics_and_predictions_check_the_row_limit(make_client):
    c = make_client(max_rows=20)
    spec = {"response": {"column": "kwh"}, "predictors": [{"column": "temp"}]}
    r = c.post("/v1/diagnostics", json={"data": {"columns": _table()}, "specification": spec})
    assert "BESTSCALE_MAX_ROWS" in _problem(r, 422)["detail"]


def _parquet(n: int) -> bytes:
    buf = io.BytesIO()
    pq.write_table(pa.table(_table(n)), buf)
    return buf.getvalue()


def _upload(c, raw: bytes, name: str):
    options = json.dumps({"response": "kwh", "predictors": ["temp"]}).encode()
    body, ctype = multipart([("file", name, raw), ("options", None, options)])
    return c.post("/v1/selections", content=body, headers={"content-type": ctype})


def test_parquet_limits_come_from_the_footer(make_client):
    c = make_client(max_rows=30, max_uncompressed_bytes=1024)
    body = _problem(_upload(c, _parquet(40), "t.parquet"), 422)
    assert "40 rows" in body["detail"] and _pointers(body) == ["/file"]
    c = make_client(max_rows=1000, max_uncompressed_bytes=1024)
    body = _problem(_upload(c, _parquet(200), "t.parquet"), 413)  # 4800 bytes of doubles
    assert "BESTSCALE_MAX_UNCOMPRESSED_BYTES" in body["detail"]
    c = make_client(max_uncompressed_bytes=1 << 20)
    assert _upload(c, _parquet(25), "t.parquet").status_code == 200


def test_csv_upload_rows_are_counted_before_decoding(make_client):
    c = make_client(max_rows=30)
    t = _table(40)
    text = "kwh,temp,doors\n" + "".join(
        f"{a},{b},{d}\n" for a, b, d in zip(t["kwh"], t["temp"], t["doors"], strict=True)
    )
    body = _problem(_upload(c, text.encode(), "t.csv"), 422)
    assert "40 rows" in body["detail"]


def test_nesting_in_the_options_part_is_a_400(make_client):
    c = make_client()
    deep = b'{"response": "kwh", "x": ' + b"[" * 100 + b"]" * 100 + b"}"
    body, ctype = multipart([("file", "t.parquet", _parquet(25)), ("options", None, deep)])
    r = c.post("/v1/selections", content=body, headers={"content-type": ctype})
    assert "levels deep" in _problem(r, 400)["detail"]


def test_response_size_is_capped(make_client):
    c = make_client(max_response_bytes=65536)
    r = c.post(
        "/v1/selections",
        json={
            "data": {"columns": _table(60)},
            "response": "kwh",
            "predictors": ["temp", "doors"],
            "top": 100,
        },
    )
    body = _problem(r, 422)
    assert "BESTSCALE_MAX_RESPONSE_BYTES" in body["detail"]


RLO = "\u202e"


def _diag_body(name: str) -> dict:
    t = _table(60)
    return {
        "data": {"columns": {"kwh": t["kwh"], name: t["temp"]}},
        "specification": {"response": {"column": "kwh"}, "predictors": [{"column": name}]},
    }


@pytest.mark.parametrize("accept", ["image/svg+xml", "image/png"])
def test_figures_carry_security_headers(make_client, accept):
    c = make_client()
    r = c.post("/v1/diagnostics", json=_diag_body("temp"), headers={"accept": accept})
    assert r.status_code == 200
    # source: W3C Content Security Policy Level 3 and the Fetch standard's nosniff
    assert "default-src 'none'" in r.headers["content-security-policy"]
    assert r.headers["x-content-type-options"] == "nosniff"


def test_bidi_controls_are_shown_escaped_in_figures_and_report(make_client):
    c = make_client()
    name = f"temp{RLO}gnp.exe"
    svg = c.post("/v1/diagnostics", json=_diag_body(name), headers={"accept": "image/svg+xml"})
    assert svg.status_code == 200
    assert RLO not in svg.text and "U+202E" in svg.text
    t = _table(60)
    page = c.post(
        "/v1/reports",
        json={
            "data": {"columns": {"kwh": t["kwh"], name: t["temp"]}},
            "response": "kwh",
            "predictors": [name],
            "top": 2,
        },
    )
    assert page.status_code == 200
    assert RLO not in page.text and "U+202E" in page.text
    # the JSON keeps the caller's string exactly
    js = c.post("/v1/diagnostics", json=_diag_body(name))
    assert js.json()["specification"]["predictors"][0]["column"] == name
