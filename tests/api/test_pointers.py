"""Domain locations of the core become JSON Pointers of each endpoint's request body
(service/api/pointers.py), and a bad cell or predictor is reported where it always was.

Reference: RFC 6901 (JSON Pointer) sections 3 and 5: "~" is written "~0", "/" is written
"~1", and the pointer of the whole document is the empty string.  The request bodies are
those of docs/api.md and the shipped examples in openapi_examples/.
"""

from __future__ import annotations

import copy
import io
import json
from pathlib import Path

import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from service.api.errors import record_problem
from service.api.pointers import (
    DIAGNOSTICS,
    ENDPOINTS,
    PREDICTIONS,
    SELECTIONS,
    RequestField,
    endpoint_of,
    error_items,
    pointer,
    pointer_of,
)
from service.core.errors import (
    BudgetError,
    Categorical,
    Cell,
    DataColumn,
    DataRow,
    ErrorRecord,
    FieldProblem,
    InputError,
    Location,
    ModelField,
    Option,
    Predictor,
    PredictorChoice,
    Predictors,
    Response,
    ResponseChoice,
    SpecField,
    Table,
)

EXAMPLES = Path(__file__).resolve().parents[2] / "openapi_examples"
PROBLEM = "application/problem+json"


@pytest.mark.parametrize(
    "parts, text",
    [
        ((), ""),  # source: RFC 6901 section 5, "" is the whole document
        (("foo", 0), "/foo/0"),  # source: RFC 6901 section 5, "/foo/0"
        (("a/b",), "/a~1b"),  # source: RFC 6901 section 5, "/a~1b"
        (("m~n",), "/m~0n"),  # source: RFC 6901 section 5, "/m~0n"
        (("~1",), "/~01"),  # "~" escaped first, so "~1" is not read back as "/"
        (("data", "columns", "pipe age (y)", 3), "/data/columns/pipe age (y)/3"),
    ],
)
def test_pointer_escapes_as_rfc_6901_says(parts, text):
    assert pointer(*parts) == text


# the same location read in each endpoint's body: (location, selections, diagnostics,
# predictions); /v1/reports and the command line take the selections body
TABLE: list[tuple[Location, str, str, str]] = [
    (Table(), "/data", "/data", "/data"),
    (Table("columns"), "/data/columns", "/data/columns", "/data/columns"),
    (Table("records"), "/data/records", "/data/records", "/data/records"),
    (Table("csv"), "/data/csv", "/data/csv", "/data/csv"),
    (Cell("cost", 4, "columns"),) + ("/data/columns/cost/4",) * 3,
    (Cell("cost", 4, "records"),) + ("/data/records/4/cost",) * 3,
    # CSV text has no pointer inside it: the message names row, line and column in words
    (Cell("cost", 4, "csv"),) + ("/data/csv",) * 3,
    (Cell("a/b", 0, "columns"),) + ("/data/columns/a~1b/0",) * 3,
    (DataColumn("age", "columns"),) + ("/data/columns/age",) * 3,
    (DataColumn("age", "records"),) + ("/data/records/0/age",) * 3,
    (DataColumn("age", "csv"),) + ("/data/csv",) * 3,
    (DataRow(2, "records"),) + ("/data/records/2",) * 3,
    (DataRow(2, "csv"),) + ("/data/csv",) * 3,
    (
        Response(),
        "/response",
        "/specification/response/column",
        "/model/specification/response/column",
    ),
    (Predictors(), "/predictors", "/specification/predictors", "/model/specification/predictors"),
    (
        Predictor(1),
        "/predictors/1",
        "/specification/predictors/1/column",
        "/model/specification/predictors/1",
    ),
    (Categorical(0),) + ("/categorical/0",) * 3,
    (Option("group_by"),) + ("/group_by",) * 3,
    (Option("validation.metric"),) + ("/validation/metric",) * 3,
    (Option("interval_method"),) + ("/interval_method",) * 3,
    (ResponseChoice(),) + ("/transforms/response",) * 3,
    (ResponseChoice(1),) + ("/transforms/response/1",) * 3,
    (PredictorChoice(),) + ("/transforms/predictors",) * 3,
    (PredictorChoice(None, 2),) + ("/transforms/predictors/2",) * 3,
    (PredictorChoice("depth"),) + ("/transforms/predictors/depth",) * 3,
    (PredictorChoice("depth", 0),) + ("/transforms/predictors/depth/0",) * 3,
    (
        SpecField.response("transform"),
        "/incumbent/response/transform",
        "/specification/response/transform",
        "/model/specification/response/transform",
    ),
    (
        SpecField.of_predictor(2, "transform", "lambda"),
        "/incumbent/predictors/2/transform/lambda",
        "/specification/predictors/2/transform/lambda",
        "/model/specification/predictors/2/transform/lambda",
    ),
    (ModelField(),) + ("/model",) * 3,
    (ModelField(("cv_plus", "fold_fits", 3, "coefficients")),)
    + ("/model/cv_plus/fold_fits/3/coefficients",) * 3,
    (RequestField("/limits/time_limit_s"),) + ("/limits/time_limit_s",) * 3,
    (RequestField(""),) + ("",) * 3,
]


@pytest.mark.parametrize("row", TABLE, ids=[repr(r[0]) for r in TABLE])
def test_each_location_kind_has_its_pointer_in_each_endpoint(row):
    where, *expected = row
    assert [pointer_of(where, e) for e in ENDPOINTS] == expected


def test_every_location_kind_of_the_core_is_mapped():
    import service.core.errors as core_errors

    kinds = {
        obj
        for obj in vars(core_errors).values()
        if isinstance(obj, type) and issubclass(obj, Location) and obj is not Location
    }
    assert kinds <= {type(row[0]) for row in TABLE}

    class Unknown(Location):
        pass

    with pytest.raises(TypeError, match="no JSON Pointer"):
        pointer_of(Unknown())


def test_paths_choose_the_body():
    assert endpoint_of("/v1/selections") == SELECTIONS
    assert endpoint_of("/v1/reports") == SELECTIONS
    assert endpoint_of("/v1/diagnostics") == DIAGNOSTICS
    assert endpoint_of("/v1/predictions") == PREDICTIONS
    assert endpoint_of("/v1/transforms") == SELECTIONS  # nothing there names a column


def test_error_items_and_records_keep_order_and_wording():
    problems = [FieldProblem(Cell("y", 0, "columns"), "first"), FieldProblem(Response(), "then")]
    assert error_items(problems, DIAGNOSTICS) == [
        {"pointer": "/data/columns/y/0", "detail": "first"},
        {"pointer": "/specification/response/column", "detail": "then"},
    ]
    rec = ErrorRecord.of(InputError("two problems", problems))
    assert record_problem(rec) == {
        "type": "urn:bestscale:problem:invalid-input",
        "title": "Invalid request content",
        "status": 422,
        "detail": "two problems",
        "errors": [
            {"pointer": "/data/columns/y/0", "detail": "first"},
            {"pointer": "/response", "detail": "then"},
        ],
    }
    assert record_problem(ErrorRecord.of(BudgetError("late")))["status"] == 503


# ----------------------------------------------------------- over HTTP, per endpoint


def _example(name: str) -> dict:
    return json.loads((EXAMPLES / f"{name}.request.json").read_text())


def _problem(r, status: int = 422) -> dict:
    assert r.status_code == status, r.text
    assert r.headers["content-type"].startswith(PROBLEM)
    return r.json()


def _pointers(r) -> list[str]:
    return [e["pointer"] for e in _problem(r)["errors"]]


@pytest.mark.parametrize("url", ["/v1/selections", "/v1/reports"])
def test_selections_and_reports_name_the_cell_and_the_predictor(client, url):
    req = _example("selections")
    bad_cell = copy.deepcopy(req)
    bad_cell["data"]["columns"]["pipe_age_years"][3] = "old"
    body = _problem(client.post(url, json=bad_cell))
    assert [e["pointer"] for e in body["errors"]] == ["/data/columns/pipe_age_years/3"]
    assert "row 4 (counting from 1) holds 'old'" in body["detail"]
    unknown = {**req, "predictors": ["pipe_length_m", "depth"]}
    assert _pointers(client.post(url, json=unknown)) == ["/predictors/1"]
    records = copy.deepcopy(req)
    cols = records["data"].pop("columns")
    rows = [dict(zip(cols, vals, strict=True)) for vals in zip(*cols.values(), strict=True)]
    rows[2]["pipe_length_m"] = True
    records["data"]["records"] = rows
    assert _pointers(client.post(url, json=records)) == ["/data/records/2/pipe_length_m"]


def test_an_incumbent_field_points_into_the_incumbent(client):
    req = _example("selections")
    req["predictors"] = ["pipe_length_m", "pipe_age_years"]
    req["transforms"] = {"response": ["identity", "log"], "predictors": ["identity"]}
    # the incumbent uses a column of the table that the request does not list
    req["incumbent"] = {
        "response": {"column": "repair_cost"},
        "predictors": [{"column": "pipe_length_m"}, {"column": "soil"}],
    }
    assert _pointers(client.post("/v1/selections", json=req)) == ["/incumbent/predictors/1/column"]


def test_diagnostics_names_the_columns_inside_the_specification(client):
    req = _example("diagnostics")
    unknown = copy.deepcopy(req)
    unknown["specification"]["predictors"][1]["column"] = "depth"
    unknown["specification"]["response"]["column"] = "price"
    assert _pointers(client.post("/v1/diagnostics", json=unknown)) == [
        "/specification/response/column",
        "/specification/predictors/1/column",
    ]
    bad_cell = copy.deepcopy(req)
    bad_cell["data"]["columns"]["pipe_length_m"][5] = -3.0  # log of a negative length
    assert _pointers(client.post("/v1/diagnostics", json=bad_cell)) == [
        "/data/columns/pipe_length_m/5",
        "/specification/predictors/0/transform",
    ]


def test_predictions_name_the_cell_and_the_model_field(client):
    req = _example("predictions")
    bad_cell = copy.deepcopy(req)
    bad_cell["data"]["records"][1]["pipe_length_m"] = -5.0
    assert _pointers(client.post("/v1/predictions", json=bad_cell)) == [
        "/data/records/1/pipe_length_m"
    ]
    missing = copy.deepcopy(req)
    for rec in missing["data"]["records"]:
        del rec["pipe_age_years"]
    assert _pointers(client.post("/v1/predictions", json=missing)) == [
        "/data/records/0/pipe_age_years"
    ]
    damaged = copy.deepcopy(req)
    damaged["model"]["format_version"] = 99
    assert _pointers(client.post("/v1/predictions", json=damaged)) == ["/model/format_version"]


def _upload(client, raw: bytes, name: str, options: dict):
    files = {"file": (name, raw, "application/octet-stream")}
    return client.post("/v1/selections", files=files, data={"options": json.dumps(options)})


def test_uploads_keep_their_wording(client):
    req = _example("selections")
    cols = copy.deepcopy(req["data"]["columns"])
    options = {k: v for k, v in req.items() if k != "data"}
    names = list(cols)
    cols["pipe_age_years"][3] = "old"
    text = "\n".join(
        [",".join(names)]
        + [",".join(str(v) for v in row) for row in zip(*cols.values(), strict=True)]
    )
    body = _problem(_upload(client, text.encode(), "t.csv", options))
    # the CSV has no pointer inside it: /data/csv, and the detail names row, line and column
    assert [e["pointer"] for e in body["errors"]] == ["/data/csv"]
    assert "data row 4 (line 5), column 'pipe_age_years' holds 'old'" in body["detail"]
    cols = copy.deepcopy(req["data"]["columns"])
    cols["pipe_length_m"][6] = float("inf")
    buf = io.BytesIO()
    pq.write_table(pa.table(cols), buf)
    # a Parquet file arrives as data.columns
    assert _pointers(_upload(client, buf.getvalue(), "t.parquet", options)) == [
        "/data/columns/pipe_length_m/6"
    ]
