"""A request turned into frozen options, every service limit at its boundary
(service/api/options.py): in-process through the one helper of each kind, then over HTTP on
every endpoint that takes a table.

References: the service settings (BESTSCALE_* variables set per test) give each limit; a
limit is met at its value and exceeded one above it (integers) or just above it (seconds);
the problem texts are the service's as they stood before the helpers were gathered here
(written out in full below); the HTTP answer of POST /v1/selections for the in-process run.
"""

from __future__ import annotations

import dataclasses
import io
import json
import time

import numpy as np
import pyarrow as pa
import pyarrow.parquet as pq
import pytest
from fastapi.testclient import TestClient
from service.api import options as o
from service.api.encode import to_jsonable
from service.api.errors import ProblemError, with_group_problems
from service.api.intake import MAX_NAME_CHARS
from service.api.pointers import pointer_of
from service.api.schemas import (
    DiagnosticsRequest,
    PredictionRequest,
    SelectionRequest,
    SpecificationIn,
    TransformsIn,
    ValidationIn,
)
from service.core import transforms as tr
from service.core.conditions import DEFAULT_ALPHA
from service.core.errors import InputError, Predictors, Table
from service.core.folds import DEFAULT_SEED
from service.core.spec import PredictorSpec, Specification
from service.selection import search_setup as ss
from service.selection.request import run_selection
from service.settings import Settings, get_settings

from .abuse_harness import multipart


@pytest.fixture
def limits(monkeypatch):
    """``limits(max_rows=12, ...)``: the service settings with these values."""

    def set_(**env):
        for k, v in env.items():
            monkeypatch.setenv(f"BESTSCALE_{k.upper()}", str(v))
        get_settings.cache_clear()

    yield set_
    monkeypatch.undo()
    get_settings.cache_clear()


def _refused(call, *args, **kw) -> tuple[str, str]:
    """(pointer, detail) of the one problem ``call`` raises."""
    with pytest.raises(InputError) as exc:
        call(*args, **kw)
    (problem,) = exc.value.problems
    assert problem.detail == exc.value.detail
    return pointer_of(problem.where), problem.detail


# ---------------------------------------------------------------- one helper per limit


@pytest.mark.parametrize(
    "subject,where,pointer",
    [
        ("the table", Table(), "/data"),
        ("the Parquet file", o.UPLOADED_FILE, "/file"),
        ("the CSV file", o.UPLOADED_FILE, "/file"),
    ],
)
def test_rows_at_the_limit_pass_and_one_more_is_refused(limits, subject, where, pointer):
    limits(max_rows=12)
    o.check_rows(12, where, subject)
    assert _refused(o.check_rows, 13, where, subject) == (
        pointer,
        f"{subject} has 13 rows; this service accepts at most 12 (setting BESTSCALE_MAX_ROWS)",
    )


def test_table_columns_at_the_limit_pass_and_one_more_is_refused(limits):
    limits(max_table_columns=4)
    for layout in ("columns", "records", "csv"):
        o.check_table_columns(4, Table(layout))
    assert _refused(o.check_table_columns, 5, Table("columns")) == (
        "/data/columns",
        "the table has 5 columns; this service accepts at most 4 in a table, used or not "
        "(setting BESTSCALE_MAX_TABLE_COLUMNS); send only the columns the request uses",
    )
    assert _refused(o.check_table_columns, 5, Table("records"), at_least=True)[1].startswith(
        "the table has more than 5 columns;"
    )
    assert _refused(
        o.check_table_columns, 5, o.UPLOADED_FILE, "the Parquet file", uploaded=True
    ) == (
        "/file",
        "the Parquet file has 5 columns; this service accepts at most 4 in a table "
        "(setting BESTSCALE_MAX_TABLE_COLUMNS)",
    )


def test_column_names_at_the_length_limit_pass_and_one_more_character_is_refused():
    o.check_column_names(["c" * MAX_NAME_CHARS, "x"], Table("csv"))
    pointer, detail = _refused(
        o.check_column_names, ["x", "n" * (MAX_NAME_CHARS + 1)], Table("csv")
    )
    assert pointer == "/data/csv"
    assert f"has {MAX_NAME_CHARS + 1} characters; at most {MAX_NAME_CHARS} are accepted" in detail
    assert len(detail) < 200  # the name is quoted cut short


def test_decoded_parquet_size_at_the_limit_passes_and_one_byte_more_is_413(limits):
    limits(max_uncompressed_bytes=1024)
    o.check_uncompressed(1024)
    with pytest.raises(ProblemError) as exc:
        o.check_uncompressed(1025)
    e = exc.value
    want = (
        "the Parquet file decompresses to 1025 bytes; the limit is 1024 "
        "(setting BESTSCALE_MAX_UNCOMPRESSED_BYTES)"
    )
    assert (e.status, e.kind, e.detail) == (413, "too-large", want)
    assert e.errors == [{"pointer": "/file", "detail": want}]


def test_columns_used_at_the_limit_pass_and_one_more_is_refused(limits):
    limits(max_columns=3)
    o.check_columns(3)
    pointer, detail = _refused(o.check_columns, 4)
    assert pointer == pointer_of(Predictors()) == "/predictors"
    assert detail == "4 columns requested; at most 3 are accepted (setting BESTSCALE_MAX_COLUMNS)"


def test_candidates_default_when_omitted_limit_accepted_one_more_refused(limits):
    limits(max_candidates=10, default_max_candidates=5)
    assert o.check_candidates(None) == 5  # the setting's default, applied here only
    assert o.check_candidates(10) == 10
    assert _refused(o.check_candidates, 11) == (
        "/limits/max_candidates",
        "max_candidates 11 exceeds the service limit of 10",
    )


def test_time_limit_default_when_omitted_limit_accepted_just_over_refused(limits):
    limits(max_time_limit_s=5, default_time_limit_s=2)
    assert o.check_time_limit(None) == 2.0
    assert o.check_time_limit(5) == 5.0
    assert _refused(o.check_time_limit, 5.5) == (
        "/limits/time_limit_s",
        "time_limit_s 5.5 exceeds the service limit of 5 s",
    )


def test_check_table_measures_each_layout_and_names_it(limits):
    limits(max_rows=12, max_table_columns=4)
    cols = {"y": list(range(12)), "x": list(range(12))}
    recs = [{"y": i, "x": i} for i in range(12)]
    csv = "y,x\n" + "".join(f"{i},{i}\n" for i in range(12))
    for data in ({"columns": cols}, {"records": recs}, {"csv": csv}):
        assert o.check_table(data) == 12
    wide = {f"c{j}": [1.0] for j in range(5)}
    assert _refused(o.check_table, {"columns": wide})[0] == "/data/columns"
    recs5 = [{f"c{j}": 1.0 for j in range(5)}]
    assert "more than 5 columns" in _refused(o.check_table, {"records": recs5})[1]
    assert _refused(o.check_table, {"csv": csv + "12,12\n"})[0] == "/data"


# ---------------------------------------------------------------- defaults written once


def _minimal(**over) -> dict:
    return {"data": {"columns": {"y": [1.0], "x": [2.0]}}, "response": "y", "predictors": ["x"]} | (
        over
    )


def test_an_omitted_option_takes_the_one_written_default():
    opts = o.search_options(SelectionRequest.model_validate(_minimal()))
    bare = ss.SearchOptions()
    for name in ("folds", "repeats", "seed", "metric", "scheme", "alpha", "top", "strategy"):
        assert getattr(opts, name) == getattr(bare, name), name
    assert (opts.folds, opts.repeats, opts.seed, opts.metric, opts.scheme) == (
        ss.DEFAULT_FOLDS,
        ss.DEFAULT_REPEATS,
        DEFAULT_SEED,
        ss.DEFAULT_METRIC,
        ss.DEFAULT_SCHEME,
    )
    assert (opts.alpha, opts.top, opts.strategy) == (
        DEFAULT_ALPHA,
        ss.DEFAULT_TOP,
        ss.DEFAULT_STRATEGY,
    )
    assert ValidationIn.model_fields["seed"].default == DEFAULT_SEED
    assert DiagnosticsRequest.model_fields["alpha"].default == DEFAULT_ALPHA
    fields = Settings.model_fields
    assert fields["default_time_limit_s"].default == ss.DEFAULT_TIME_LIMIT_S == bare.time_limit_s
    assert fields["default_max_candidates"].default == ss.DEFAULT_MAX_CANDIDATES


def test_the_service_defaults_reach_the_options_and_the_deadline(limits):
    limits(default_time_limit_s=7, default_max_candidates=9)
    before = time.monotonic()
    opts = o.search_options(SelectionRequest.model_validate(_minimal()))
    assert opts.time_limit_s == 7 and opts.max_candidates == 9
    assert opts.deadline is not None and opts.deadline.limit_s == 7
    assert before + 7 <= opts.deadline.at <= time.monotonic() + 7


# ---------------------------------------------------------------- requests -> options


def _road(n: int = 40) -> dict:
    """Invented: hours to resurface a road section by its length and traffic class."""
    rng = np.random.default_rng(2)
    length = rng.uniform(0.2, 3.0, n)
    traffic = rng.choice(["low", "high"], n)
    hours = np.exp(1.0 + 0.8 * np.log(length) + 0.2 * (traffic == "high") + rng.normal(0, 0.1, n))
    return {
        "data": {
            "columns": {
                "hours": hours.tolist(),
                "length_km": length.tolist(),
                "traffic": traffic.tolist(),
            }
        },
        "response": "hours",
        "predictors": ["length_km", "traffic"],
        "categorical": ["traffic"],
        "transforms": {"response": ["identity", "log"], "predictors": ["identity", "log"]},
        "validation": {"folds": 4, "seed": 3},
        "top": 2,
    }


def test_a_selection_job_is_frozen_and_carries_the_request_and_one_deadline():
    req = SelectionRequest.model_validate(
        {**_road(), "alpha": 0.01, "limits": {"time_limit_s": 20}, "trust": {"stability": True}}
    )
    job = o.selection_job(req)
    opts = job.search
    assert (opts.folds, opts.seed, opts.alpha, opts.top) == (4, 3, 0.01, 2)
    assert opts.response_transforms == (
        ss.TransformChoice(tr.Transform("identity")),
        ss.TransformChoice(tr.Transform("log")),
    )
    assert opts.time_limit_s == 20
    assert opts.deadline is not None and opts.deadline.limit_s == 20
    assert opts.clock() is opts.deadline  # every part of the request asks the same clock
    assert job.table.predictors == ("length_km", "traffic") and job.table.categorical == (
        "traffic",
    )
    assert job.trust.stability and not job.trust.optimism
    assert job.max_groups == get_settings().max_groups
    with pytest.raises(dataclasses.FrozenInstanceError):
        job.search.alpha = 0.2  # type: ignore[misc]


def test_a_selection_job_refuses_what_the_request_shows(limits):
    limits(max_candidates=10, default_max_candidates=5, max_time_limit_s=5, default_time_limit_s=5)
    over = SelectionRequest.model_validate({**_road(), "limits": {"max_candidates": 11}})
    assert _refused(o.selection_job, over)[0] == "/limits/max_candidates"
    bad = SelectionRequest.model_validate(
        {**_road(), "transforms": {"predictors": {"depth": ["log"]}}}
    )
    assert _refused(o.selection_job, bad)[0] == "/transforms/predictors/depth"
    # the time limit is checked first (the request's clock starts with it)
    both = _road()
    both["limits"] = {"time_limit_s": 6}
    both["data"]["columns"].update({f"u{j}": [None] * 40 for j in range(2000)})
    assert _refused(o.selection_job, SelectionRequest.model_validate(both))[0] == (
        "/limits/time_limit_s"
    )


def test_diagnostics_and_predictions_become_options_with_the_table_limits(limits):
    limits(max_columns=3, max_rows=12)
    spec = {
        "response": {"column": "y"},
        "predictors": [{"column": "a"}, {"column": "b", "transform": {"name": "categorical"}}],
    }
    cols = {"y": [1.0] * 12, "a": [2.0] * 12, "b": ["p"] * 12}
    job = o.diagnostics_job(
        DiagnosticsRequest.model_validate({"data": {"columns": cols}, "specification": spec})
    )
    assert (job.table.response, job.table.predictors, job.table.categorical) == (
        "y",
        ("a", "b"),
        ("b",),
    )
    assert job.max_points == 2000 and job.search.alpha == DEFAULT_ALPHA
    assert job.specification.spec == Specification(
        "y",
        tr.Transform("identity"),
        (
            PredictorSpec("a", tr.Transform("identity")),
            PredictorSpec("b", tr.Transform("categorical")),
        ),
    )
    three = {**spec, "predictors": [*spec["predictors"], {"column": "c"}]}
    wide = DiagnosticsRequest.model_validate(
        {"data": {"columns": {**cols, "c": [1.0] * 12}}, "specification": three}
    )
    assert _refused(o.diagnostics_job, wide)[0] == "/predictors"  # /specification/... over HTTP
    pred = PredictionRequest.model_validate({"model": {}, "data": {"columns": cols}})
    assert o.prediction_job(pred).data["columns"] == cols
    long = PredictionRequest.model_validate({"model": {}, "data": {"columns": {"a": [1.0] * 13}}})
    assert _refused(o.prediction_job, long)[0] == "/data"


def test_listed_transforms_arrive_typed_with_how_they_were_named():
    req = TransformsIn.model_validate(
        {
            "response": ["log", "power", {"name": "box_cox", "lambda": 0.25}],
            "predictors": {
                "x": [{"name": "log", "shift": "auto"}, {"name": "log", "shift": 2}, "power"],
                "z": [{"name": "power"}, {"name": "power", "exponent": 0.5}],
            },
        }
    )
    assert o.response_choices(req.response) == (
        ss.TransformChoice(tr.Transform("log")),
        ss.TransformChoice(tr.Transform("power"), ladder=True),
        ss.TransformChoice(tr.Transform("box_cox", lam=0.25)),
    )
    assert o.predictor_choices(req.predictors) == {
        "x": (
            ss.TransformChoice(tr.Transform("log"), auto_shift=True),
            ss.TransformChoice(tr.Transform("log", shift=2.0)),
            ss.TransformChoice(tr.Transform("power"), ladder=True),
        ),
        # an object without an exponent asks for the estimated power (not the ladder)
        "z": (
            ss.TransformChoice(tr.Transform("power")),
            ss.TransformChoice(tr.Transform("power", exponent=0.5)),
        ),
    }
    assert o.response_choices(None) is None and o.predictor_choices(None) is None
    assert o.predictor_choices(["sqrt"]) == (ss.TransformChoice(tr.Transform("sqrt")),)


def test_a_sent_specification_is_typed_and_keeps_the_request_s_own_form():
    sent = SpecificationIn.model_validate(
        {
            "response": {"column": "y", "transform": {"name": "log", "shift": "auto"}},
            "predictors": [
                {"column": "a", "transform": {"name": "box_cox", "lambda": 0.0004}},
                {"column": "b", "transform": {"name": "log", "shift": "auto"}},
                {"column": "c"},
            ],
            "intercept": False,
        }
    )
    typed = o.sent_specification(sent)
    assert typed.spec == Specification(
        "y",
        tr.Transform("log"),
        (
            PredictorSpec("a", tr.Transform("box_cox", lam=0.0)),  # read as the log's limit
            PredictorSpec("b", tr.Transform("log")),
            PredictorSpec("c", tr.Transform("identity")),
        ),
        False,
    )
    assert typed.response_auto_shift and typed.predictors_auto_shift == frozenset({1})
    assert typed.as_sent is sent  # shown back as sent where it cannot be built


def test_in_process_answer_equals_the_http_answer():
    req = _road()
    job = o.selection_job(SelectionRequest.model_validate(req))
    body = to_jsonable(with_group_problems(run_selection(job, o.service())))
    from service.app import app

    with TestClient(app) as c:
        http = c.post("/v1/selections", json=req).json()
    # source: the HTTP response for the same request (elapsed time aside)
    for b in (body, http):
        b["search"].pop("elapsed_s", None)
    assert body == http
    assert body["cautions"] and body["service_version"]


# ---------------------------------------------------------------- every limit over HTTP

SEL, REP, DIAG, PRED = "/v1/selections", "/v1/reports", "/v1/diagnostics", "/v1/predictions"


@pytest.fixture
def client(limits):
    def build(**env):
        limits(**env)
        from service.app import create_app

        return TestClient(create_app(), raise_server_exceptions=False)

    return build


def _kiln(n: int, extra: int = 0) -> dict:
    """Invented: firing energy of a pottery kiln (kWh) by load mass and firing hours."""
    rng = np.random.default_rng(5)
    mass = rng.uniform(20, 120, n)
    hours = rng.uniform(6, 14, n)
    kwh = 4.0 + 0.9 * mass + 6.0 * hours + rng.normal(0, 2.0, n)
    cols = {"kwh": kwh.tolist(), "mass": mass.tolist(), "hours": hours.tolist()}
    cols.update({f"note{j}": ["-"] * n for j in range(extra)})
    return cols


def _body(endpoint: str, cols: dict, predictors=("mass", "hours"), model=None) -> dict:
    data = {"columns": cols}
    if endpoint == DIAG:
        spec = {"response": {"column": "kwh"}, "predictors": [{"column": p} for p in predictors]}
        return {"data": data, "specification": spec, "validation": {"folds": 3}}
    if endpoint == PRED:
        return {"model": model, "data": data}
    return {
        "data": data,
        "response": "kwh",
        "predictors": list(predictors),
        "transforms": {"response": ["identity"], "predictors": ["identity"]},
        "validation": {"folds": 3},
    }


def _post(c, endpoint: str, cols: dict, predictors=("mass", "hours")):
    model = None
    if endpoint == PRED:
        issued = c.post(SEL, json=_body(SEL, _kiln(12)))
        assert issued.status_code == 200, issued.text[:300]
        model = issued.json()["ranking"][0]["model"]
    return c.post(endpoint, json=_body(endpoint, cols, predictors, model))


def _problem(r, status: int = 422) -> tuple[list[str], str]:
    assert r.status_code == status, (r.status_code, r.text[:400])
    assert r.headers["content-type"].startswith("application/problem+json")
    body = r.json()
    return [e["pointer"] for e in body["errors"]], body["detail"]


def _ok(r) -> None:
    assert r.status_code == 200, (r.status_code, r.text[:400])


ENDPOINTS = [SEL, REP, DIAG, PRED]


@pytest.mark.parametrize("endpoint", ENDPOINTS)
def test_the_row_limit_on_every_endpoint(client, endpoint):
    c = client(max_rows=12)
    _ok(_post(c, endpoint, _kiln(12)))
    pointers, detail = _problem(_post(c, endpoint, _kiln(13)))
    assert pointers == ["/data"]
    assert detail == (
        "the table has 13 rows; this service accepts at most 12 (setting BESTSCALE_MAX_ROWS)"
    )


@pytest.mark.parametrize("endpoint", ENDPOINTS)
def test_the_table_column_limit_on_every_endpoint(client, endpoint):
    c = client(max_table_columns=4)
    _ok(_post(c, endpoint, _kiln(12, extra=1)))
    pointers, detail = _problem(_post(c, endpoint, _kiln(12, extra=2)))
    assert pointers == ["/data/columns"]
    assert detail.startswith("the table has 5 columns; this service accepts at most 4")
    assert detail.endswith("send only the columns the request uses")


@pytest.mark.parametrize("endpoint", ENDPOINTS)
def test_the_name_length_limit_on_every_endpoint(client, endpoint):
    c = client()
    at = {**_kiln(12), "n" * MAX_NAME_CHARS: [1.0] * 12}
    _ok(_post(c, endpoint, at))
    over = {**_kiln(12), "n" * (MAX_NAME_CHARS + 1): [1.0] * 12}
    pointers, detail = _problem(_post(c, endpoint, over))
    assert pointers == ["/data/columns"] and f"{MAX_NAME_CHARS + 1} characters" in detail


@pytest.mark.parametrize(
    "endpoint,pointer",
    [(SEL, "/predictors"), (REP, "/predictors"), (DIAG, "/specification/predictors")],
)
def test_the_columns_used_limit_on_every_endpoint_that_names_columns(client, endpoint, pointer):
    """/v1/predictions takes its columns from the model, which a selection within the limit
    issued."""
    c = client(max_columns=3)
    cols = {**_kiln(12), "doors": [float(i % 3) for i in range(12)]}
    _ok(_post(c, endpoint, cols, ("mass", "hours")))
    pointers, detail = _problem(_post(c, endpoint, cols, ("mass", "hours", "doors")))
    assert pointers == [pointer]
    assert detail == "4 columns requested; at most 3 are accepted (setting BESTSCALE_MAX_COLUMNS)"


def _parquet(cols: dict) -> bytes:
    buf = io.BytesIO()
    pq.write_table(pa.table(cols), buf)
    return buf.getvalue()


def _csv(cols: dict) -> bytes:
    names = list(cols)
    rows = zip(*cols.values(), strict=True)
    return (",".join(names) + "\n" + "".join(",".join(map(str, r)) + "\n" for r in rows)).encode()


@pytest.mark.parametrize("endpoint", [SEL, REP])
@pytest.mark.parametrize("kind", ["Parquet", "CSV"])
def test_the_row_limit_on_uploads(client, endpoint, kind):
    c = client(max_rows=12)
    options = {k: v for k, v in _body(SEL, {}).items() if k != "data"}

    def upload(n: int):
        cols = _kiln(n)
        raw, name = (_parquet(cols), "t.parquet") if kind == "Parquet" else (_csv(cols), "t.csv")
        body, ctype = multipart(
            [("file", name, raw), ("options", None, json.dumps(options).encode())]
        )
        return c.post(endpoint, content=body, headers={"content-type": ctype})

    _ok(upload(12))
    pointers, detail = _problem(upload(13))
    assert pointers == ["/file"]
    assert detail == (
        f"the {kind} file has 13 rows; this service accepts at most 12 (setting BESTSCALE_MAX_ROWS)"
    )


@pytest.mark.parametrize("endpoint", [SEL, REP])
def test_the_parquet_column_and_size_limits_on_uploads(client, endpoint):
    options = json.dumps({k: v for k, v in _body(SEL, {}).items() if k != "data"}).encode()

    def upload(c, cols):
        body, ctype = multipart([("file", "t.parquet", _parquet(cols)), ("options", None, options)])
        return c.post(endpoint, content=body, headers={"content-type": ctype})

    c = client(max_table_columns=3)
    _ok(upload(c, _kiln(12)))
    pointers, detail = _problem(upload(c, _kiln(12, extra=1)))
    assert pointers == ["/file"] and detail == (
        "the Parquet file has 4 columns; this service accepts at most 3 in a table "
        "(setting BESTSCALE_MAX_TABLE_COLUMNS)"
    )
    raw = _parquet(_kiln(80))
    size = pq.ParquetFile(io.BytesIO(raw)).metadata.row_group(0).total_byte_size
    assert size > 1024  # above the setting's floor
    _ok(upload(client(max_uncompressed_bytes=size), _kiln(80)))
    pointers, detail = _problem(upload(client(max_uncompressed_bytes=size - 1), _kiln(80)), 413)
    assert pointers == ["/file"] and detail == (
        f"the Parquet file decompresses to {size} bytes; the limit is {size - 1} "
        "(setting BESTSCALE_MAX_UNCOMPRESSED_BYTES)"
    )


def test_the_candidate_and_time_limits_over_http(client):
    """Both on /v1/selections and /v1/reports (the endpoints that search)."""
    c = client(
        max_candidates=10, default_max_candidates=5, max_time_limit_s=5, default_time_limit_s=5
    )
    for endpoint in (SEL, REP):
        at = {**_body(SEL, _kiln(12)), "limits": {"max_candidates": 10, "time_limit_s": 5}}
        _ok(c.post(endpoint, json=at))
        over = {**at, "limits": {"max_candidates": 11}}
        assert _problem(c.post(endpoint, json=over))[0] == ["/limits/max_candidates"]
        over = {**at, "limits": {"time_limit_s": 5.5}}
        assert _problem(c.post(endpoint, json=over)) == (
            ["/limits/time_limit_s"],
            "time_limit_s 5.5 exceeds the service limit of 5 s",
        )


def test_the_group_limit_over_http(client):
    c = client(max_groups=2)
    for endpoint in (SEL, REP):
        body = _body(SEL, {**_kiln(24), "kiln": ["a", "b"] * 12})
        body["group_by"] = "kiln"
        _ok(c.post(endpoint, json=body))
        body["data"]["columns"]["kiln"] = ["a", "b", "c"] * 8
        pointers, detail = _problem(c.post(endpoint, json=body))
        assert pointers == ["/group_by"] and detail == (
            "'kiln' has 3 values; at most 2 groups are accepted per request (setting "
            "BESTSCALE_MAX_GROUPS); split the job over several requests"
        )
