"""Hostile input: whatever a caller sends, the answer is a 4xx problem (RFC 9457) or a 200
with finite JSON, never a 5xx.

Each case names what it sends; where the fault has an obvious place, the problem's pointer
(RFC 6901) must point there.  The data are small invented tables (water-main repairs) so the
whole file runs in seconds.
"""

from __future__ import annotations

import copy
import json
import math
from pathlib import Path

import numpy as np
import pytest

EXAMPLES = Path(__file__).resolve().parents[2] / "openapi_examples"
SEL, PRED, DIAG = "/v1/selections", "/v1/predictions", "/v1/diagnostics"
PROBLEM = "application/problem+json"
FAST = {"response": ["identity", "log"], "predictors": ["identity", "log"]}


def _strict_json(text: str):
    def refuse(token):
        raise AssertionError(f"non-finite JSON token {token}")

    return json.loads(text, parse_constant=refuse)


def _finite(node) -> bool:
    if isinstance(node, float):
        return math.isfinite(node)
    if isinstance(node, dict):
        return all(_finite(v) for v in node.values())
    if isinstance(node, list):
        return all(_finite(v) for v in node)
    return True


def check(r, pointer: str | None = None, status: int | None = None) -> dict:
    """The answer is a 4xx problem (pointing at ``pointer`` when given) or a finite 200."""
    assert r.status_code < 500, (r.status_code, r.text[:400])
    body = _strict_json(r.text)  # source: RFC 8259 section 6 (no NaN or Infinity in JSON)
    assert _finite(body)
    if status is not None:
        assert r.status_code == status, r.text[:400]
    if r.status_code == 200:
        assert pointer is None, f"expected a problem at {pointer}, got 200"
        return body
    assert 400 <= r.status_code < 500
    assert r.headers["content-type"].startswith(PROBLEM)
    # source: RFC 9457 section 3.1 (type, title, status, detail); errors[] is our extension
    for key in ("type", "title", "status", "detail", "errors"):
        assert key in body, key
    assert body["status"] == r.status_code
    for e in body["errors"]:
        assert e["pointer"] == "" or e["pointer"].startswith("/"), e  # source: RFC 6901 section 3
    if pointer is not None:
        assert pointer in [e["pointer"] for e in body["errors"]], body
    return body


def _table(n: int = 30, seed: int = 3) -> dict:
    rng = np.random.default_rng(seed)
    length = rng.uniform(5, 400, n)
    age = rng.integers(1, 80, n).astype(float)
    cost = np.exp(5.5 + 0.7 * np.log(length) + 0.012 * age + rng.normal(0, 0.25, n))
    return {
        "repair_cost": cost.round(2).tolist(),
        "pipe_length_m": length.round(1).tolist(),
        "pipe_age_years": age.tolist(),
    }


def sel(**over) -> dict:
    body = {
        "data": {"columns": _table()},
        "response": "repair_cost",
        "predictors": ["pipe_length_m", "pipe_age_years"],
        "transforms": FAST,
        "validation": {"folds": 3},
        "top": 2,
    }
    body.update(over)
    return body


def raw(client, path: str, text: str | bytes, ctype: str = "application/json"):
    data = text.encode() if isinstance(text, str) else text
    return client.post(path, content=data, headers={"Content-Type": ctype})


# ---------------------------------------------------------------- malformed bodies


@pytest.mark.parametrize(
    "text",
    [
        pytest.param('{"data": {"columns": ', id="truncated"),
        pytest.param('{"response": "y"} trailing', id="trailing-garbage"),
        pytest.param(b"\xff\xfe{}", id="not-utf8"),
        pytest.param('{"response": "\\ud800"}', id="lone-surrogate"),
        pytest.param("", id="empty"),
        pytest.param("null", id="null"),
        pytest.param("[1, 2]", id="array"),
        pytest.param('"a string"', id="string"),
        pytest.param("{'response': 'y'}", id="single-quotes"),
    ],
)
def test_malformed_body_is_400(client, text):
    check(raw(client, SEL, text), status=400)


@pytest.mark.parametrize("token", ["NaN", "Infinity", "-Infinity", "1e400", "-1e999"])
def test_non_finite_json_tokens_are_400(client, token):
    body = json.dumps(sel())
    body = body.replace('"repair_cost": [', f'"repair_cost": [{token}, ', 1)
    r = check(raw(client, SEL, body), status=400)
    assert "JSON" in r["detail"]


@pytest.mark.parametrize(
    "ctype", ["text/plain", "application/xml", "application/x-www-form-urlencoded", ""]
)
def test_non_json_content_type_is_415(client, ctype):
    r = client.post(SEL, content=json.dumps(sel()).encode(), headers={"Content-Type": ctype})
    check(r, status=415)


# ---------------------------------------------------------------- wrongly typed fields


@pytest.mark.parametrize(
    "field,value,pointer",
    [
        ("response", 123, "/response"),
        ("predictors", "pipe_length_m", "/predictors"),
        ("predictors", [1, 2], "/predictors/0"),
        ("alpha", "0.05", "/alpha"),  # a number in a string is not a number
        ("alpha", "NaN", "/alpha"),
        ("alpha", True, "/alpha"),
        ("top", 2.5, "/top"),
        ("top", "5", "/top"),
        ("intercept", "true", "/intercept"),
        ("validation", {"folds": "5"}, "/validation/folds"),
        ("validation", {"seed": -1}, "/validation/seed"),
        ("limits", {"time_limit_s": "Infinity"}, "/limits/time_limit_s"),
        ("limits", {"max_candidates": 0}, "/limits/max_candidates"),
        ("units", {"pipe_length_m": 5}, "/units/pipe_length_m"),
        ("data", [], "/data"),
        ("data", {"columns": {"repair_cost": 1}}, "/data/columns/repair_cost"),
        ("data", {"columns": {}, "csv": "a,b\n1,2\n"}, "/data"),
        ("response", "", "/response"),
        ("response", "c" * 5000, "/response"),
    ],
)
def test_wrongly_typed_field_is_422_at_its_pointer(client, field, value, pointer):
    check(client.post(SEL, json=sel(**{field: value})), pointer=pointer, status=422)


@pytest.mark.parametrize("cell", ["NaN", "nan", "Infinity", "-inf", "1,5", "", [1], {"v": 1}, True])
def test_non_numeric_cell_in_numeric_column_is_422_at_the_cell(client, cell):
    t = _table()
    t["pipe_length_m"][4] = cell
    r = client.post(SEL, json=sel(data={"columns": t}))
    if isinstance(cell, str) and not cell:
        check(r)  # an empty string may be read as a missing value or refused: never a 5xx
    else:
        check(r, pointer="/data/columns/pipe_length_m/4", status=422)


def test_deeply_nested_cell_is_a_problem_not_a_crash(client):
    body = json.dumps(sel())
    deep = "[" * 50000 + "]" * 50000
    body = body.replace('"pipe_length_m": [', f'"pipe_length_m": [{deep}, ', 1)
    check(raw(client, SEL, body))


@pytest.mark.parametrize("cell", ["NaN", "inf", "-Infinity"])
def test_non_finite_words_in_csv_are_422(client, cell):
    t = _table(12)
    lines = ["repair_cost,pipe_length_m,pipe_age_years"] + [
        f"{a},{b},{c}"
        for a, b, c in zip(t["repair_cost"], t["pipe_length_m"], t["pipe_age_years"], strict=True)
    ]
    lines[3] = lines[3].split(",")[0] + f",{cell}," + lines[3].split(",")[2]
    r = client.post(SEL, json=sel(data={"csv": "\n".join(lines) + "\n"}))
    check(r, pointer="/data/csv", status=422)


# ---------------------------------------------------------------- magnitudes


@pytest.mark.parametrize("scale", [1e150, 1e300, 1e-150, 1e-300])
def test_huge_and_tiny_response_magnitudes(client, scale):
    t = _table()
    t["repair_cost"] = [v * scale for v in t["repair_cost"]]
    b = sel(
        data={"columns": t},
        transforms={
            "response": ["identity", "log", "sqrt", "square", "reciprocal"],
            "predictors": ["identity", "log", "square"],
        },
    )
    body = check(client.post(SEL, json=b))
    if "ranking" in body:
        assert body["ranking"], body


@pytest.mark.parametrize("scale", [1e200, 1e-200])
def test_huge_and_tiny_predictor_magnitudes(client, scale):
    t = _table()
    t["pipe_length_m"] = [v * scale for v in t["pipe_length_m"]]
    b = sel(
        data={"columns": t},
        transforms={"response": ["log"], "predictors": ["identity", "log", "square", "reciprocal"]},
    )
    check(client.post(SEL, json=b))


def test_mixed_extreme_magnitudes_in_one_column(client):
    t = _table()
    t["pipe_length_m"][0], t["pipe_length_m"][1] = 1e-300, 1e300
    check(client.post(SEL, json=sel(data={"columns": t})))


def test_box_cox_lambda_at_its_bound_on_large_values(client):
    t = _table()
    t["repair_cost"] = [v * 1e6 for v in t["repair_cost"]]
    spec = {
        "response": {"column": "repair_cost", "transform": {"name": "box_cox", "lambda": 5}},
        "predictors": [{"column": "pipe_length_m"}],
    }
    check(
        client.post(
            DIAG, json={"data": {"columns": t}, "specification": spec, "validation": {"folds": 3}}
        )
    )


# ---------------------------------------------------------------- domains of transforms


def test_zeros_in_response_under_log(client):
    t = _table()
    t["repair_cost"][2] = 0.0
    t["repair_cost"][7] = 0.0
    body = check(
        client.post(
            SEL,
            json=sel(
                data={"columns": t}, transforms={"response": ["log"], "predictors": ["identity"]}
            ),
        )
    )
    if "ranking" in body:  # a shifted log, and it says so
        transform = body["ranking"][0]["specification"]["response"]["transform"]
        assert transform["name"] == "log" and transform.get("shift", 0) > 0
        assert any(
            "shift" in w or "zero" in w for w in body["ranking"][0]["warnings"] + body["warnings"]
        )


def test_negative_response_under_log_only(client):
    t = _table()
    t["repair_cost"][5] = -120.0
    check(
        client.post(
            SEL,
            json=sel(
                data={"columns": t}, transforms={"response": ["log"], "predictors": ["identity"]}
            ),
        ),
        status=422,
    )


def test_negative_and_zero_predictor_under_log(client):
    t = _table()
    t["pipe_length_m"][0], t["pipe_length_m"][1] = 0.0, -3.0
    body = check(
        client.post(
            SEL,
            json=sel(
                data={"columns": t}, transforms={"response": ["identity"], "predictors": ["log"]}
            ),
        )
    )
    if "ranking" in body:
        for entry in body["ranking"]:
            for p in entry["specification"]["predictors"]:
                assert p["transform"]["name"] != "log" or p["transform"].get("shift", 0) > 3


def test_negative_response_under_a_fixed_log_in_diagnostics(client):
    t = _table()
    t["repair_cost"][1] = -5.0
    spec = {
        "response": {"column": "repair_cost", "transform": {"name": "log"}},
        "predictors": [{"column": "pipe_length_m"}],
    }
    check(
        client.post(DIAG, json={"data": {"columns": t}, "specification": spec}),
        pointer="/specification/response/transform",
        status=422,
    )


@pytest.mark.parametrize("where", ["response", "predictor"])
def test_years_like_values_under_yeo_johnson(client, where):
    rng = np.random.default_rng(11)
    years = rng.integers(1950, 2024, 40).astype(float)
    t = {
        "year_laid": years.tolist(),
        "repair_cost": (3000 + 40 * (years - 1950) + rng.normal(0, 200, 40)).round(2).tolist(),
    }
    if where == "response":
        b = {
            "data": {"columns": t},
            "response": "year_laid",
            "predictors": ["repair_cost"],
            "transforms": {"response": ["yeo_johnson", "box_cox"], "predictors": ["identity"]},
            "validation": {"folds": 3},
        }
    else:
        b = {
            "data": {"columns": t},
            "response": "repair_cost",
            "predictors": ["year_laid"],
            "transforms": {
                "response": ["yeo_johnson"],
                "predictors": ["identity", "log", "square", "reciprocal"],
            },
            "validation": {"folds": 3},
        }
    body = check(client.post(SEL, json=b))
    if "ranking" in body:
        assert body["ranking"]


def test_constant_response_is_422(client):
    t = _table()
    t["repair_cost"] = [100.0] * len(t["repair_cost"])
    check(client.post(SEL, json=sel(data={"columns": t})), status=422)


# ---------------------------------------------------------------- duplicate and missing columns


def test_duplicate_predictor_is_422(client):
    check(
        client.post(SEL, json=sel(predictors=["pipe_length_m", "pipe_length_m"])),
        pointer="/predictors/1",
        status=422,
    )


def test_response_listed_as_predictor_is_422(client):
    check(client.post(SEL, json=sel(predictors=["repair_cost"])), status=422)


def test_duplicate_csv_header_is_422(client):
    check(
        client.post(
            SEL, json=sel(data={"csv": "repair_cost,pipe_length_m,pipe_length_m\n1,2,3\n"})
        ),
        pointer="/data/csv",
        status=422,
    )


def test_duplicate_json_key_in_columns_is_refused(client):
    # source: RFC 8259 section 4 (object names SHOULD be unique; a parser that keeps the
    # last silently would drop a column without a word)
    t = _table()
    text = json.dumps(sel(data={"columns": t}))
    dup = json.dumps(t["pipe_length_m"][::-1])
    text = text.replace('"pipe_age_years":', f'"pipe_length_m": {dup}, "pipe_age_years":', 1)
    body = check(raw(client, SEL, text), pointer="/data/columns/pipe_length_m", status=422)
    assert "more than once" in body["detail"]


def test_duplicate_key_in_one_record_is_refused_at_the_record(client):
    t = _table(12)
    recs = [dict(zip(t, vals, strict=True)) for vals in zip(*t.values(), strict=True)]
    text = json.dumps(sel(data={"records": recs}))
    text = text.replace('"pipe_age_years":', '"pipe_age_years": 1.0, "pipe_age_years":', 1)
    check(raw(client, SEL, text), pointer="/data/records/0/pipe_age_years", status=422)


def test_duplicate_top_level_key_in_pretty_printed_json_is_refused(client):
    text = json.dumps(sel(), indent=2).replace('"top" :', '"top":')
    text = text.replace('"top":', '"top" :\n 1,\n "top":', 1)
    check(raw(client, SEL, text), pointer="/top", status=422)


def test_strings_that_look_like_keys_are_not_duplicates(client):
    # a unit text containing '":' makes the quick count disagree; the exact pass clears it
    body = sel(units={"pipe_length_m": 'metre ":" length', "repair_cost": 'a "b": c'})
    check(raw(client, SEL, json.dumps(body)), status=200)


def test_missing_response_column_is_422(client):
    check(client.post(SEL, json=sel(response="cost_eur")), pointer="/response", status=422)


def test_missing_predictor_column_is_422(client):
    check(
        client.post(SEL, json=sel(predictors=["pipe_length_m", "soil"])),
        pointer="/predictors/1",
        status=422,
    )


def test_record_missing_a_key_is_422_at_the_record(client):
    t = _table(12)
    recs = [dict(zip(t, vals, strict=True)) for vals in zip(*t.values(), strict=True)]
    del recs[3]["pipe_age_years"]
    check(client.post(SEL, json=sel(data={"records": recs})), status=422)


def test_columns_of_unequal_length_are_422(client):
    t = _table()
    t["pipe_age_years"] = t["pipe_age_years"][:-3]
    check(client.post(SEL, json=sel(data={"columns": t})), status=422)


def test_all_rows_missing_is_422(client):
    t = _table(12)
    t["pipe_length_m"] = [None] * 12
    check(client.post(SEL, json=sel(data={"columns": t})), status=422)


# ---------------------------------------------------------------- CSV


def _csv_lines(n: int = 15) -> list[str]:
    t = _table(n)
    return ["repair_cost,pipe_length_m,pipe_age_years"] + [
        f"{a},{b},{c}"
        for a, b, c in zip(t["repair_cost"], t["pipe_length_m"], t["pipe_age_years"], strict=True)
    ]


@pytest.mark.parametrize(
    "mangle",
    [
        pytest.param(lambda ls: [*ls[:4], ls[4] + ",7", *ls[5:]], id="extra-field"),
        pytest.param(lambda ls: [*ls[:4], ls[4].rsplit(",", 1)[0], *ls[5:]], id="missing-field"),
        pytest.param(lambda ls: ls[:1], id="header-only"),
        pytest.param(lambda ls: [ls[0] + ',"unterminated', *ls[1:]], id="open-quote"),
        pytest.param(lambda ls: ["\x00" + ls[0], *ls[1:]], id="nul-byte"),
    ],
)
def test_ragged_or_broken_csv_is_422(client, mangle):
    text = "\n".join(mangle(_csv_lines())) + "\n"
    check(client.post(SEL, json=sel(data={"csv": text})), status=422)


@pytest.mark.parametrize(
    "variant",
    [
        pytest.param(lambda t: t.replace("\n", "\r\n"), id="crlf"),
        pytest.param(lambda t: "\ufeff" + t, id="byte-order-mark"),
        pytest.param(lambda t: t.rstrip("\n"), id="no-final-newline"),
    ],
)
def test_csv_variants_are_read_or_refused_cleanly(client, variant):
    text = variant("\n".join(_csv_lines()) + "\n")
    check(client.post(SEL, json=sel(data={"csv": text})))


# ---------------------------------------------------------------- tampered model


@pytest.fixture(scope="module")
def issued():
    """A model the service issued, shipped with the examples."""
    return json.loads((EXAMPLES / "predictions.request.json").read_text())


def _tamper(issued, fn) -> dict:
    body = copy.deepcopy(issued)
    fn(body["model"])
    return body


@pytest.mark.parametrize(
    "fn,pointer",
    [
        pytest.param(
            lambda m: m["coefficients"].__setitem__(1, m["coefficients"][1] * 1.01),
            "/model/checksum",
            id="coefficient-changed",
        ),
        pytest.param(lambda m: m.pop("checksum"), None, id="checksum-removed"),
        pytest.param(
            lambda m: m.__setitem__("checksum", "0" * 64), "/model/checksum", id="checksum-forged"
        ),
        pytest.param(
            lambda m: m.__setitem__("format_version", 999),
            "/model/format_version",
            id="future-format",
        ),
        pytest.param(
            lambda m: m.__setitem__("coefficients", "NaN"), None, id="coefficients-string"
        ),
        pytest.param(
            lambda m: m["specification"]["response"]["transform"].__setitem__("name", "exp"),
            None,
            id="unknown-transform",
        ),
        pytest.param(
            lambda m: m.__setitem__("residual_variance", -1.0), None, id="negative-variance"
        ),
        pytest.param(lambda m: m.clear(), None, id="empty-model"),
        pytest.param(lambda m: m.__setitem__("__class__", "os.system"), None, id="foreign-key"),
    ],
)
def test_tampered_model_is_refused(client, issued, fn, pointer):
    check(client.post(PRED, json=_tamper(issued, fn)), pointer=pointer, status=422)


def test_model_of_the_wrong_type_is_422(client, issued):
    body = dict(issued, model=["not", "a", "model"])
    check(client.post(PRED, json=body), pointer="/model", status=422)


def test_issued_model_still_predicts(client, issued):
    body = check(client.post(PRED, json=issued), status=200)
    assert len(body["predictions"]) == len(issued["data"]["records"])


def test_prediction_rows_with_extreme_values_stay_finite_or_refused(client, issued):
    body = copy.deepcopy(issued)
    body["data"]["records"][0]["pipe_length_m"] = 1e300
    body["data"]["records"][1]["pipe_age_years"] = -1e300
    check(client.post(PRED, json=body))


# ---------------------------------------------------------------- diagnostics


def test_diagnostics_with_more_folds_than_rows_is_422(client):
    spec = {
        "response": {"column": "repair_cost", "transform": {"name": "log"}},
        "predictors": [{"column": "pipe_length_m", "transform": {"name": "log"}}],
    }
    r = client.post(
        DIAG,
        json={"data": {"columns": _table(12)}, "specification": spec, "validation": {"folds": 20}},
    )
    check(r, pointer="/data/columns", status=422)
