"""The shipped demo: its request file matches the generator and the search finds its scale."""

import json
from pathlib import Path

from fastapi.testclient import TestClient
from service.app import app
from service.demo import demo_request

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
