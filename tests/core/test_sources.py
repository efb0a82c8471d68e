"""Every ``source`` in a response names the method and its published reference
(``method: Author (year)``), never the library call that computes it; every reported
``method`` carries one."""

from __future__ import annotations

import json
import re
from pathlib import Path

import pytest
from fastapi.testclient import TestClient
from service.app import app
from service.core import sources as src

EXAMPLES = Path(__file__).resolve().parents[2] / "openapi_examples"
CITATION = re.compile(r"^[^:;]+: .*\b(1[89]\d\d|20\d\d)\b")
LIBRARIES = re.compile(r"statsmodels|scipy|numpy|sklearn|scikit|pandas|\w+\.\w+\(", re.I)


@pytest.fixture(scope="module")
def bodies():
    with TestClient(app) as client:
        out = {}
        for name in ("selections", "diagnostics", "predictions"):
            request = json.loads((EXAMPLES / f"{name}.request.json").read_text())
            r = client.post(f"/v1/{name}", json=request)
            assert r.status_code == 200, r.text[:300]
            out[name] = r.json()
        request = json.loads((EXAMPLES / "selections.request.json").read_text())
        request["trust"] = {"stability": True, "resamples": 4}
        request["transforms"] = {"response": ["identity", "log"], "predictors": ["identity", "log"]}
        request["top"] = 2
        r = client.post("/v1/selections", json=request)
        assert r.status_code == 200, r.text[:300]
        out["trust"] = r.json()
        request = json.loads((EXAMPLES / "predictions.request.json").read_text())
        request["interval_method"] = "normal"
        r = client.post("/v1/predictions", json=request)
        assert r.status_code == 200, r.text[:300]
        out["predictions_normal"] = r.json()
    return out


def _walk(node, path=""):
    if isinstance(node, dict):
        yield path, node
        for k, v in node.items():
            yield from _walk(v, f"{path}/{k}")
    elif isinstance(node, list):
        for i, v in enumerate(node):
            yield from _walk(v, f"{path}/{i}")


def test_cite_form():
    assert src.cite("m", "A (1990)", "B (2000)") == "m: A (1990); B (2000)"


def test_tables_look_up_by_method_name():
    # source: the method names of the HTTP contract (inference.standard_errors,
    # prediction_intervals, a power's method, a lambda's family)
    assert src.STANDARD_ERRORS["hc3"] == src.STANDARD_ERRORS.hc3
    assert "Newey & West (1987)" in src.STANDARD_ERRORS["hac"]
    assert "MacKinnon & White (1985)" in src.STANDARD_ERRORS["hc3"]
    assert "Barber, Candes, Ramdas & Tibshirani (2021)" in src.PREDICTION_INTERVAL["cv_plus"]
    assert "Box & Tidwell (1962)" in src.POWER["profile"]
    assert "Yeo & Johnson (2000)" in src.LAMBDA["yeo_johnson"]
    for name in ("robust", "get", "__class__", ""):
        with pytest.raises(KeyError):
            src.STANDARD_ERRORS[name]
    assert src.LAMBDA.get("log", "none") == "none"
    assert src.LAMBDA.get("box_cox", "none") == src.LAMBDA.box_cox


def test_every_source_is_method_and_reference(bodies):
    seen = set()
    for name, body in bodies.items():
        for path, node in _walk(body):
            if "source" in node and isinstance(node["source"], str):
                text = node["source"]
                assert CITATION.match(text), (name, path, text)
                assert not LIBRARIES.search(text), (name, path, text)
                seen.add(text)
            if isinstance(node.get("method"), str):
                assert "source" in node, (name, path, node["method"])
    # tests, the band, intervals, lambda, powers, smoothers and resampling all cite
    for expected in (
        src.SHAPIRO_WILK,
        src.BREUSCH_PAGAN,
        src.COOKS_DISTANCE,
        src.ONE_SE_BAND,
        src.LAMBDA["box_cox"],
        src.POWER["box_tidwell"],
        src.PREDICTION_INTERVAL["cv_plus"],  # the predictions example asks for cv_plus
        src.PREDICTION_INTERVAL["normal"],
        src.LOWESS,
        src.QUARTILE_LINE,
        src.BOOTSTRAP,
        src.STANDARD_ERRORS["classical"],
    ):
        assert expected in seen, expected
