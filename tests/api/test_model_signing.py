"""Keyed model artifacts: HMAC-SHA-256 signatures, key rotation, and range checks on load.

A forged model (a coefficient changed and the plain checksum recomputed) must be refused
when the service holds a key; a model that is correctly signed but holds values no issued
model can hold must be refused as well, never overflow or answer 500.
"""

from __future__ import annotations

import copy
import hashlib
import hmac
import json

import numpy as np
import pytest
from fastapi.testclient import TestClient
from service.api.render.model import checksum, sign
from service.settings import Settings, get_settings

KEY_A = "a" * 16 + "0123456789abcdef0123"
KEY_B = "b" * 16 + "fedcba9876543210fedc"


@pytest.fixture
def env(monkeypatch):
    """Set BESTSCALE_* variables for the next requests (signing reads the settings)."""

    def setenv(**values):
        for k in ("MODEL_KEY", "MODEL_KEY_ID", "MODEL_PREVIOUS_KEYS"):
            monkeypatch.delenv(f"BESTSCALE_{k}", raising=False)
        for k, v in values.items():
            monkeypatch.setenv(f"BESTSCALE_{k.upper()}", v)
        get_settings.cache_clear()

    yield setenv
    monkeypatch.undo()
    get_settings.cache_clear()


def _data() -> dict:
    """Invented: delivery times of a courier service against parcel weight and district."""
    rng = np.random.default_rng(11)
    n = 60
    weight = rng.uniform(1.0, 30.0, n)
    district = rng.choice(["harbour", "old town", "uplands"], n)
    shift = np.select([district == "harbour", district == "uplands"], [0.2, -0.1], 0.0)
    minutes = np.exp(2.0 + 0.4 * np.log(weight) + shift + rng.normal(0, 0.15, n))
    return {
        "columns": {
            "minutes": minutes.tolist(),
            "weight_kg": weight.tolist(),
            "district": district.tolist(),
        }
    }


def _select(client) -> dict:
    r = client.post(
        "/v1/selections",
        json={
            "data": _data(),
            "response": "minutes",
            "predictors": ["weight_kg", "district"],
            "top": 2,
        },
    )
    assert r.status_code == 200, r.text
    return r.json()["ranking"][0]["model"]


ROWS = {"columns": {"weight_kg": [4.0, 12.0], "district": ["harbour", "uplands"]}}


def _predict(client, model):
    return client.post("/v1/predictions", json={"model": model, "data": ROWS})


def _pointer(r) -> str:
    body = r.json()
    return body["errors"][0]["pointer"] if body.get("errors") else body.get("pointer")


def _resign(model: dict, kid: str = "k1", key: str = KEY_A) -> dict:
    model["checksum"] = checksum(model)
    return sign(model, (kid, {kid: key.encode()}))


def test_signature_is_hmac_sha256_of_the_canonical_form(client, env):
    env(model_key=KEY_A)
    model = _select(client)
    sig = model["signature"]
    assert sig["algorithm"] == "HMAC-SHA-256" and sig["key_id"] == "k1"
    # the canonical bytes kept for signing never reach the answer
    assert not any(k.startswith("_") for k in model)
    # source: RFC 2104 HMAC with SHA-256 as Python's standard hmac module computes it, over
    # the key id, a newline and the sorted compact JSON of the model without checksum and
    # signature (numbers as floats)
    body = {k: v for k, v in model.items() if k not in ("checksum", "signature")}

    def floats(v):
        if isinstance(v, dict):
            return {k: floats(x) for k, x in v.items()}
        if isinstance(v, list):
            return [floats(x) for x in v]
        if isinstance(v, int) and not isinstance(v, bool):
            return float(v)
        return v

    text = json.dumps(floats(body), sort_keys=True, separators=(",", ":"))
    want = hmac.new(KEY_A.encode(), b"k1\n" + text.encode(), hashlib.sha256).hexdigest()
    assert sig["value"] == want
    assert _predict(client, model).status_code == 200


def test_forged_coefficient_with_recomputed_checksum_is_refused(client, env):
    env(model_key=KEY_A)
    model = _select(client)
    model["coefficients"][1] += 5.0
    model["checksum"] = checksum(model)  # the plain hash is easy to recompute
    r = _predict(client, model)
    assert r.status_code == 422 and _pointer(r) == "/model/signature/value"
    assert "forged" in r.json()["detail"]


def test_unsigned_and_unknown_key_are_refused(client, env):
    env(model_key=KEY_A)
    model = _select(client)
    stripped = copy.deepcopy(model)
    del stripped["signature"]
    r = _predict(client, stripped)
    assert r.status_code == 422 and _pointer(r) == "/model/signature"
    other = _resign(copy.deepcopy(model), "k9", KEY_B)
    r = _predict(client, other)
    assert r.status_code == 422 and _pointer(r) == "/model/signature/key_id"
    odd = copy.deepcopy(model)
    odd["signature"]["algorithm"] = "MD5"
    r = _predict(client, odd)
    assert r.status_code == 422 and _pointer(r) == "/model/signature/algorithm"


def test_key_rotation_accepts_previous_keys_until_retired(client, env):
    env(model_key=KEY_A, model_key_id="2026-a")
    old = _select(client)
    env(model_key=KEY_B, model_key_id="2026-b", model_previous_keys=f"2026-a:{KEY_A}")
    assert _predict(client, old).status_code == 200
    new = _select(client)
    assert new["signature"]["key_id"] == "2026-b"
    assert _predict(client, new).status_code == 200
    env(model_key=KEY_B, model_key_id="2026-b")  # the old key retired
    r = _predict(client, old)
    assert r.status_code == 422 and _pointer(r) == "/model/signature/key_id"


def test_without_a_key_models_are_marked_unsigned(client, env):
    env()
    model = _select(client)
    assert model["signature"]["algorithm"] == "none"
    assert "BESTSCALE_MODEL_KEY" in model["signature"]["note"]
    assert _predict(client, model).status_code == 200
    signed = _resign(copy.deepcopy(model))
    r = _predict(client, signed)
    assert r.status_code == 422 and _pointer(r) == "/model/signature/key_id"


def _damage_variance(m):
    m["residual_variance"] = 1e300


def _damage_exponent(m):
    m["specification"]["predictors"][0]["transform"] = {"name": "power", "exponent": 1e-300}
    m["terms"][1] = "weight_kg^1e-300"


def _damage_residuals(m):
    m["residuals"]["values"] = m["residuals"]["values"] * 40


def _damage_coefficient(m):
    m["coefficients"][0] = 1e305


def _damage_lambda(m):
    m["specification"]["response"]["transform"] = {"name": "box_cox", "lambda": 7.0}


def _damage_kind(m):
    m["residuals"]["kind"] = "quantiles"  # a small model keeps all its residuals


def _damage_level(m):
    m["levels"]["district"]["levels"][0] = "x" * 300


@pytest.mark.parametrize(
    "damage,ptr",
    [
        (_damage_variance, "/model/residual_variance"),
        (_damage_exponent, "/model/specification/predictors/0/transform/exponent"),
        (_damage_residuals, "/model/residuals"),
        (_damage_coefficient, "/model/coefficients"),
        (_damage_lambda, "/model/specification/response/transform/lambda"),
        (_damage_level, "/model/levels/district/levels"),
        (_damage_kind, "/model/residuals"),
    ],
    ids=[
        "variance",
        "exponent",
        "residual-count",
        "coefficient",
        "lambda",
        "level-length",
        "residual-kind",
    ],
)
def test_signed_but_damaged_models_are_refused(client, env, damage, ptr):
    env(model_key=KEY_A)
    model = _select(client)
    damage(model)
    _resign(model)
    r = _predict(client, model)
    assert r.status_code == 422, r.text
    assert _pointer(r) == ptr


@pytest.mark.parametrize(
    "values,fragment",
    [
        ({"model_key": "short"}, "at least 32"),
        ({"model_key": KEY_A, "model_key_id": "a b"}, "key id"),
        ({"model_key": KEY_A, "model_previous_keys": "nocolon"}, "id:key"),
        ({"model_previous_keys": f"k0:{KEY_B}"}, "BESTSCALE_MODEL_KEY is not"),
        ({"model_key": KEY_A, "model_previous_keys": '{"k1": "' + KEY_B + '"}'}, "both"),
    ],
)
def test_model_key_settings_are_checked(monkeypatch, values, fragment):
    for k, v in values.items():
        monkeypatch.setenv(f"BESTSCALE_{k.upper()}", v)
    with pytest.raises(ValueError, match=fragment):
        Settings()


def test_unset_key_is_warned_at_start(env, caplog):
    env()
    from service.app import create_app

    with caplog.at_level("WARNING", logger="bestscale"):
        create_app()
    assert any("BESTSCALE_MODEL_KEY is not set" in r.getMessage() for r in caplog.records)


@pytest.fixture(scope="module")
def client():
    from service.app import app

    with TestClient(app, raise_server_exceptions=False) as c:
        yield c
