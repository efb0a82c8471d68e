"""Search options over HTTP: an estimated predictor power asked for by name, a power without
exponent refused in specifications, and the search strategy chosen by the caller."""

from __future__ import annotations

import numpy as np
import pytest

SEL, DIAG = "/v1/selections", "/v1/diagnostics"


def _power_table(n: int = 300, seed: int = 11) -> dict:
    rng = np.random.default_rng(seed)
    x = rng.uniform(1.0, 20.0, n)
    w = rng.uniform(0.0, 5.0, n)
    y = 4.0 + 3.0 * x**0.5 + 0.8 * w + rng.normal(0.0, 0.15, n)
    return {"y": y.tolist(), "x": x.tolist(), "w": w.tolist()}


def _profile_argmin(t: dict) -> float:
    """Brute-force profile of the residual sum of squares over the exponent (step 1e-3)."""
    y, x, w = (np.asarray(t[k]) for k in ("y", "x", "w"))
    best = (np.inf, None)
    for a in np.round(np.arange(-1.5, 2.0 + 1e-9, 1e-3), 6):
        col = np.log(x) if abs(a) < 1e-12 else (x**a - 1.0) / a
        A = np.column_stack([np.ones_like(x), col, w])
        coef, *_ = np.linalg.lstsq(A, y, rcond=None)
        r = y - A @ coef
        best = min(best, (float(r @ r), float(a)))
    return best[1]


def test_estimated_power_requested_by_name_is_reported_with_its_ladder_rung(client):
    t = _power_table()
    r = client.post(
        SEL,
        json={
            "data": {"columns": t},
            "response": "y",
            "predictors": ["x", "w"],
            "top": 10,
            "validation": {"folds": 4},
            "transforms": {
                "response": ["identity"],
                "predictors": {
                    "x": ["identity", {"name": "power", "estimated": True}],
                    "w": ["identity"],
                },
            },
        },
    )
    assert r.status_code == 200, r.text[:400]
    body = r.json()
    rep = body["search"]["predictor_powers"]["x"][0]
    # source: brute-force profile over the exponent with numpy least squares
    assert rep["power"] == pytest.approx(_profile_argmin(t), abs=1e-3)
    # source: simulation truth y = 4 + 3 x^0.5 + 0.8 w + N(0, 0.15^2)
    assert rep["ci_low"] <= 0.5 <= rep["ci_high"] and rep["ladder"] == 0.5
    used = [e["specification"]["predictors"][0]["transform"] for e in body["ranking"]]
    assert {"name": "sqrt"} in used  # the ladder rung 1/2, searched as a fixed transform
    # the estimate's interval holds 0.5, so it is listed as sqrt, the estimate kept beside it
    assert not [v for v in used if v.get("estimated")]
    sqrt_entry = next(
        e
        for e in body["ranking"]
        if e["specification"]["predictors"][0]["transform"] == {"name": "sqrt"}
        and e["specification"]["response"]["transform"] == {"name": "identity"}
    )
    note = sqrt_entry["estimates"]["read_as_ladder"][0]
    assert note["column"] == "x" and note["ladder"] == 0.5
    assert note["power"] == pytest.approx(rep["power"], abs=1e-9)


def test_bare_power_in_a_predictor_list_is_estimated_too(client):
    t = _power_table(seed=12)
    r = client.post(
        SEL,
        json={
            "data": {"columns": t},
            "response": "y",
            "predictors": ["x"],
            "transforms": {"response": ["identity"], "predictors": [{"name": "power"}]},
            "validation": {"folds": 3},
        },
    )
    assert r.status_code == 200, r.text[:400]
    assert "x" in r.json()["search"]["predictor_powers"]


@pytest.mark.parametrize(
    "where,spec,pointer",
    [
        (
            "diagnostics",
            {
                "response": {"column": "y"},
                "predictors": [{"column": "x", "transform": {"name": "power", "estimated": True}}],
            },
            "/specification/predictors/0",
        ),
        (
            "incumbent",
            {
                "response": {"column": "y", "transform": {"name": "power"}},
                "predictors": [{"column": "x"}],
            },
            "/incumbent/response",
        ),
    ],
)
def test_a_specification_needs_a_fixed_exponent(client, where, spec, pointer):
    t = _power_table(n=40)
    if where == "diagnostics":
        r = client.post(DIAG, json={"data": {"columns": t}, "specification": spec})
    else:
        r = client.post(
            SEL,
            json={"data": {"columns": t}, "response": "y", "predictors": ["x"], "incumbent": spec},
        )
    assert r.status_code == 422
    assert r.headers["content-type"].startswith("application/problem+json")
    assert pointer in [e["pointer"] for e in r.json()["errors"]]


@pytest.mark.parametrize("strategy", ["exhaustive", "screened"])
def test_the_caller_chooses_the_strategy(client, strategy):
    t = _power_table(n=120)
    r = client.post(
        SEL,
        json={
            "data": {"columns": t},
            "response": "y",
            "predictors": ["x", "w"],
            "strategy": strategy,
            "validation": {"folds": 3},
            "transforms": {
                "response": ["identity", "log"],
                "predictors": ["identity", "log", "sqrt"],
            },
        },
    )
    assert r.status_code == 200, r.text[:400]
    s = r.json()["search"]
    assert s["strategy"]["name"] == strategy
    if strategy == "exhaustive":
        assert s["complete"] and s["candidates_scored"] == s["candidates_considered"] == 18


def test_unknown_strategy_is_422(client):
    r = client.post(
        SEL,
        json={
            "data": {"columns": _power_table(n=40)},
            "response": "y",
            "predictors": ["x"],
            "strategy": "greedy",
        },
    )
    assert r.status_code == 422 and r.json()["errors"][0]["pointer"] == "/strategy"
