"""Response encoding (service/api/encode.py): plain containers, every key kept (a caller's
column may start with an underscore), non-finite numbers refused, and the response size cap.

Reference: RFC 8259 (JSON has no NaN or Infinity); orjson and the standard json module must
read back exactly what was encoded.
"""

from __future__ import annotations

import json
import math

import numpy as np
import orjson
import pytest
from fastapi.testclient import TestClient
from service.api.encode import JSONBody, to_jsonable
from service.app import app
from service.core.errors import InputError


def test_numpy_values_become_plain_json_and_every_key_is_kept():
    body = {
        "a": np.float64(0.1),
        "b": np.arange(3),
        "c": (np.int32(4), np.bool_(True)),
        "_id": np.float64(2.0),
        "nested": {"_level": 1, "ok": [np.float32(0.5)]},
    }
    out = to_jsonable(body)
    assert out == {
        "a": 0.1,
        "b": [0, 1, 2],
        "c": [4, True],
        "_id": 2.0,
        "nested": {"_level": 1, "ok": [0.5]},
    }
    # source: the standard json module reads the orjson bytes back to the same values
    assert json.loads(orjson.dumps(out)) == out
    assert type(out["c"][1]) is bool and type(out["b"][0]) is int


@pytest.mark.parametrize("bad", [math.nan, math.inf, np.float64(-np.inf)])
def test_non_finite_numbers_are_refused(bad):
    # source: RFC 8259 section 6 (numeric values that cannot be represented, such as
    # Infinity and NaN, are not permitted)
    with pytest.raises(ValueError, match="non-finite"):
        to_jsonable({"x": [1.0, bad]})


def test_the_response_cap_is_a_problem_naming_the_setting(env):
    env(max_response_bytes=65536)
    small = JSONBody({"x": 1.5})
    assert json.loads(small.body) == {"x": 1.5}
    with pytest.raises(InputError) as exc:
        JSONBody({"x": list(range(20000))})
    assert "BESTSCALE_MAX_RESPONSE_BYTES" in exc.value.detail


def _reference_jsonable(obj):
    """The straightforward walk, one call per item (what the number-list fast path must
    reproduce)."""
    if isinstance(obj, dict):
        return {str(k): _reference_jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_reference_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return [_reference_jsonable(v) for v in obj.tolist()]
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        assert math.isfinite(float(obj))
        return float(obj)
    return obj


def test_number_lists_take_one_pass_and_give_what_the_item_walk_gives():
    rng = np.random.default_rng(5)
    body = {
        "residuals": rng.normal(size=3000).tolist(),
        "folds": rng.integers(1, 6, 3000).tolist(),
        "flags": [True, False, True],
        "ints_and_flags": [1, True, 0, False],
        "ints_and_floats": [1, 2.5, 3],
        "tuple": (0.5, 1.5),
        "empty": [],
        "matrix": rng.normal(size=(3, 4)),
        "counts": np.arange(4, dtype=np.int64),
        "numpy_items": [np.float64(0.25), np.int32(2), 1.0],
        "nested": [{"x": [0.1, 0.2], "_id": [1.0]}, [[1.0, 2.0], [3, 4]]],
        "_kept": [np.float64(0.5), 2],
    }
    got = to_jsonable(body)
    # source: the item-by-item walk written out above
    assert got == _reference_jsonable(body)
    # same types as well as values (a bool stays a bool, an int an int)
    assert json.dumps(got) == json.dumps(_reference_jsonable(body))
    assert [type(v) for v in got["ints_and_flags"]] == [int, bool, int, bool]
    assert got["tuple"] == [0.5, 1.5] and type(got["tuple"]) is list


@pytest.mark.parametrize("bad", [math.nan, math.inf, -math.inf])
def test_a_non_finite_number_deep_in_a_long_list_is_refused(bad):
    values = np.linspace(0.0, 1.0, 5000).tolist()
    values[4321] = bad
    # source: RFC 8259 section 6 (no NaN or Infinity in JSON)
    with pytest.raises(ValueError, match="non-finite"):
        to_jsonable({"values": values})
    with pytest.raises(ValueError, match="non-finite"):
        to_jsonable({"values": np.array(values)})


def _with_column(name: str) -> dict:
    rng = np.random.default_rng(1)
    x = rng.uniform(1, 10, 60)
    y = 2 + 0.5 * x + rng.normal(0, 0.3, 60)
    return {
        "data": {"columns": {"y": y.tolist(), name: x.tolist()}},
        "response": "y",
        "predictors": [name],
        "transforms": {"response": ["identity"], "predictors": {name: ["identity", "power"]}},
        "top": 1,
    }


def test_a_column_named_with_a_leading_underscore_keeps_its_entries_and_its_model_works():
    client = TestClient(app)
    plain = client.post("/v1/selections", json=_with_column("x"))
    under = client.post("/v1/selections", json=_with_column("_x"))
    assert plain.status_code == under.status_code == 200, under.text
    a, b = plain.json(), under.json()
    # source: the same request with the column called "x": the answers differ only by name
    assert b["search"]["predictor_transforms"].keys() == {"_x"}
    assert b["search"]["predictor_transforms"]["_x"] == a["search"]["predictor_transforms"]["x"]
    assert b["search"]["predictor_powers"]["_x"] == a["search"]["predictor_powers"]["x"]
    model = b["ranking"][0]["model"]
    assert model["training_range"]["_x"] == a["ranking"][0]["model"]["training_range"]["x"]
    # the artifact's checksum covers what was sent: the model is accepted back
    rows = {"columns": {"_x": [2.0, 5.0]}}
    r = client.post("/v1/predictions", json={"model": model, "data": rows})
    assert r.status_code == 200, r.text
    ref = client.post(
        "/v1/predictions",
        json={"model": a["ranking"][0]["model"], "data": {"columns": {"x": [2.0, 5.0]}}},
    )
    assert r.json()["predictions"] == ref.json()["predictions"]
