"""The shipped demo: its request file matches the generator and the search finds its scale."""

import json
from pathlib import Path

from fastapi.testclient import TestClient
from service.app import app
from service.demo import demo_request

from tests.typed import spec_dict

EXAMPLES = Path(__file__).resolve().parents[1] / "openapi_examples"


def test_example_file_is_the_generated_demo():
    stored = json.loads((EXAMPLES / "selections.request.json").read_text())
    assert stored["data"] == demo_request()["data"]


def test_demo_top_entry_is_the_generating_scale():
    # source: service/demo/__init__.py generates log(cost) linear in log(length), age and soil
    r = TestClient(app).post("/v1/selections", json=demo_request())
    assert r.status_code == 200, r.text
    spec = r.json()["ranking"][0]["specification"]
    assert spec["response"]["transform"]["name"] == "log"
    by_col = {p["column"]: p["transform"]["name"] for p in spec["predictors"]}
    assert by_col == {"pipe_length_m": "log", "pipe_age_years": "identity", "soil": "categorical"}


def test_demo_with_default_options_ranks_the_generating_scale_first_with_distinct_scales():
    # source: service/demo/__init__.py generates log(cost) linear in log(length), age and soil
    body = {k: v for k, v in demo_request().items() if k != "validation"}
    body["top"] = 10
    r = TestClient(app).post("/v1/selections", json=body)
    assert r.status_code == 200, r.text
    out = r.json()
    first = out["ranking"][0]
    spec = first["specification"]
    assert spec["response"]["transform"] == {"name": "log"}
    by_col = {p["column"]: p["transform"]["name"] for p in spec["predictors"]}
    assert by_col == {"pipe_length_m": "log", "pipe_age_years": "identity", "soil": "categorical"}
    # the estimated powers of length (about 0.03) and age (about 0.8) are read as log and 1
    read = first["estimates"]["read_as_ladder"]
    assert {(n["parameter"], n.get("column")) for n in read} >= {
        ("predictor_power", "pipe_length_m")
    }
    for n in read:
        assert n["ci_low"] <= n["ladder"] <= n["ci_high"]
    # one threshold, reported once, and no two entries on the same scales
    thresholds = {e["score"]["parts"]["one_se_threshold"] for e in out["ranking"]}
    assert thresholds == {out["search"]["band"]["threshold"]}
    keys = [json.dumps(e["specification"], sort_keys=True) for e in out["ranking"]]
    assert len(set(keys)) == len(keys)
    assert all(e["score"]["parts"]["conditions_failed"] is not None for e in out["ranking"])
    assert not any(
        e["specification"]["response"]["transform"]["name"] == "yeo_johnson" for e in out["ranking"]
    )


def test_demo_rank_1_survives_single_row_drops():
    # source: service/demo/__init__.py (generating scale); tests/benchmarks/stability.py
    # measures the share over many drops, here two seeded drops must both keep rank 1
    import numpy as np
    from service.core.data import prepare
    from service.demo import demo_columns
    from service.selection.search import run_selection
    from service.selection.search_setup import SearchOptions

    cols = demo_columns()
    for drop in np.random.default_rng(3).choice(len(cols["repair_cost"]), 2, replace=False):
        sub = {k: v[:drop] + v[drop + 1 :] for k, v in cols.items()}
        prep = prepare(
            {"columns": sub}, "repair_cost", ["pipe_length_m", "pipe_age_years", "soil"], ["soil"]
        )
        spec = spec_dict(run_selection(prep, SearchOptions(), "t").ranking[0].specification)
        assert spec["response"]["transform"] == {"name": "log"}
        assert [p["transform"]["name"] for p in spec["predictors"]] == [
            "log",
            "identity",
            "categorical",
        ]
