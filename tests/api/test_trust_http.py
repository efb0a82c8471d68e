"""The optional trust block over HTTP (the measures themselves: tests/selection/test_trust.py)."""

import numpy as np
from fastapi.testclient import TestClient
from service.app import app


def _body(**extra):
    rng = np.random.default_rng(11)
    n = 120
    x = rng.uniform(1, 50, n)
    y = np.exp(0.5 + 0.6 * np.log(x) + rng.normal(0, 0.1, n))  # source: simulated power law
    return {
        "data": {"columns": {"y": y.tolist(), "x": x.tolist()}},
        "response": "y",
        "predictors": ["x"],
        "top": 1,
        "transforms": {"response": ["identity", "log"], "predictors": ["identity", "log"]},
        **extra,
    }


def test_trust_block_only_when_asked():
    client = TestClient(app)
    plain = client.post("/v1/selections", json=_body()).json()
    assert "trust" not in plain
    r = client.post(
        "/v1/selections", json=_body(trust={"stability": True, "optimism": True, "resamples": 5})
    )
    assert r.status_code == 200, r.text
    trust = r.json()["trust"]
    assert trust["resamples"] == 5
    assert 0.0 <= trust["stability"] <= 1.0
    # a clear power law: the log-log winner stays first in most resamples
    assert trust["stability"] >= 0.6
    assert np.isfinite(trust["optimism"]["gap"])


def test_trust_with_group_by_is_refused_with_a_pointer():
    body = _body(trust={"stability": True}, group_by="g")
    body["data"]["columns"]["g"] = ["a", "b"] * 60
    r = TestClient(app).post("/v1/selections", json=body)
    assert r.status_code == 422
    assert r.json()["errors"][0]["pointer"] == "/trust"
