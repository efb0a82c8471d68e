"""Rewrite the example files from the demo data: ``python openapi_examples/regenerate.py``.

Each endpoint has ``<name>.request.json`` and the response the service gave to it,
``<name>.response.json``.  tests/api/test_examples.py posts every request file.
"""

from __future__ import annotations

import json
from pathlib import Path

from fastapi.testclient import TestClient

from service.app import app
from service.demo import demo_request

HERE = Path(__file__).resolve().parent


def _write(name: str, body: dict) -> None:
    (HERE / name).write_text(json.dumps(body, indent=1, ensure_ascii=False) + "\n")


def main() -> None:
    client = TestClient(app)
    sel = demo_request()
    sel["units"] = {"repair_cost": "currency units", "pipe_length_m": "metre",
                    "pipe_age_years": "year"}
    answers = {}
    for name, path, body in [("selections", "/v1/selections", sel)]:
        _write(f"{name}.request.json", body)
        r = client.post(path, json=body)
        r.raise_for_status()
        answers[name] = r.json()
        _write(f"{name}.response.json", answers[name])
    pred = {"model": answers["selections"]["ranking"][0]["model"],
            "data": {"records": [
                {"pipe_length_m": 35.0, "pipe_age_years": 12, "soil": "loam"},
                {"pipe_length_m": 220.0, "pipe_age_years": 55, "soil": "clay"},
                {"pipe_length_m": 900.0, "pipe_age_years": 30, "soil": "sand"}]},
            "interval": 0.9, "interval_method": "cv_plus"}
    diag = {"data": sel["data"],
            "specification": answers["selections"]["ranking"][0]["specification"],
            "alpha": 0.05, "units": sel["units"], "max_points": 200}
    _write("diagnostics.request.json", diag)
    r = client.post("/v1/diagnostics", json=diag)
    r.raise_for_status()
    _write("diagnostics.response.json", r.json())
    _write("predictions.request.json", pred)
    r = client.post("/v1/predictions", json=pred)
    r.raise_for_status()
    _write("predictions.response.json", r.json())
    _write("transforms.response.json", client.get("/v1/transforms").json())


if __name__ == "__main__":
    main()
