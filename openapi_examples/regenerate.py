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
    requests = {"selections": ("/v1/selections", demo_request())}
    for name, (path, body) in requests.items():
        _write(f"{name}.request.json", body)
        r = client.post(path, json=body)
        r.raise_for_status()
        _write(f"{name}.response.json", r.json())
    _write("transforms.response.json", client.get("/v1/transforms").json())


if __name__ == "__main__":
    main()
