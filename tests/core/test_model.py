"""The model artifact (service/core/model.py): what it stores, its canonical form, checksum and
HMAC signature, and the round trip through JSON back into a loaded model.

References: hashlib.sha256 over JSON with sorted keys and no spaces (the canonical form the
module documents); RFC 2104 HMAC-SHA-256 via Python's hmac module; statsmodels OLS for the
stored coefficients and (X'X)^-1; numpy quantiles for the stored residual summary.
"""

from __future__ import annotations

import copy
import hashlib
import hmac
import json

import numpy as np
import pytest
import statsmodels.api as sm
from service.core import model
from service.core.data import prepare
from service.core.errors import InputError
from service.core.predict import MODEL, load_model
from service.core.spec import Specification
from service.selection.entries import fitted_model

KEYS = ("k2", {"k1": b"first key, retired soon", "k2": b"current key of this service"})


@pytest.fixture(scope="module")
def issued():
    """Invented: minutes a depot needs to load a truck, by pallets and loading bay."""
    rng = np.random.default_rng(3)
    n = 50
    pallets = rng.uniform(2, 30, n)
    bay = rng.choice(["east", "north", "west"], n)
    minutes = np.exp(1.0 + 0.6 * np.log(pallets) + 0.1 * (bay == "west") + rng.normal(0, 0.1, n))
    cols = {"minutes": minutes.tolist(), "pallets": pallets.tolist(), "bay": bay.tolist()}
    prep = prepare({"columns": cols}, "minutes", ["pallets", "bay"], ["bay"])
    spec = Specification.from_dict(
        {
            "response": {"column": "minutes", "transform": {"name": "log"}},
            "predictors": [
                {"column": "pallets", "transform": {"name": "log"}},
                {"column": "bay", "transform": {"name": "categorical"}},
            ],
        }
    )
    concrete, design, fit, _ = fitted_model(spec, prep)
    art = model.build_model(concrete, design, fit, prep, "test-version")
    return art, design, prep


def test_stored_fit_equals_statsmodels(issued):
    art, design, prep = issued
    # source: statsmodels OLS on the same design (reference library); rel 1e-9
    ref = sm.OLS(np.log(prep.y), design.X).fit()
    np.testing.assert_allclose(art["coefficients"], ref.params, rtol=1e-9)
    np.testing.assert_allclose(art["xtx_inverse"], ref.normalized_cov_params, rtol=1e-8)
    assert art["residual_variance"] == pytest.approx(ref.scale, rel=1e-9)
    assert art["df_residual"] == ref.df_resid and art["n"] == prep.n
    assert art["terms"] == design.names
    # source: numpy hat-matrix diagonal X (X'X)^-1 X'
    H = design.X @ np.linalg.solve(design.X.T @ design.X, design.X.T)
    assert art["max_leverage"] == pytest.approx(float(np.max(np.diag(H))), rel=1e-9)
    assert art["training_range"]["pallets"] == {
        "min": float(prep.numeric["pallets"].min()),
        "max": float(prep.numeric["pallets"].max()),
    }
    assert art["residuals"]["kind"] == "all" and len(art["residuals"]["values"]) == prep.n


def test_checksum_is_sha256_of_the_sorted_compact_json(issued):
    art, _, _ = issued
    body = {k: v for k, v in art.items() if k not in ("checksum", "signature")}
    # source: hashlib.sha256 over json.dumps(sort_keys=True, separators=(",", ":")) with
    # every number as a float (so 63 and 63.0 give the same checksum)
    text = json.dumps(model._canon(body), sort_keys=True, separators=(",", ":"))
    assert art["checksum"] == hashlib.sha256(text.encode()).hexdigest()
    again = copy.deepcopy(art)
    again["n"] = float(again["n"])  # a client that writes numbers its own way
    assert model.checksum(again) == art["checksum"]
    again["n"] += 1
    assert model.checksum(again) != art["checksum"]


def test_json_round_trip_loads_the_same_model(issued):
    art, design, _ = issued
    signed = model.sign(copy.deepcopy(art), KEYS)
    wire = json.loads(json.dumps(signed, allow_nan=False))
    loaded = load_model(wire, KEYS)
    np.testing.assert_array_equal(loaded.coef, art["coefficients"])
    np.testing.assert_array_equal(loaded.xtx_inverse, np.array(art["xtx_inverse"]))
    assert list(loaded.terms) == design.names and loaded.residual_kind == "all"
    assert loaded.spec.to_dict() == art["specification"]


def test_signature_is_rfc2104_hmac_of_key_id_and_canonical_json(issued):
    art, _, _ = issued
    signed = model.sign(copy.deepcopy(art), KEYS)
    sig = signed["signature"]
    assert sig["algorithm"] == "HMAC-SHA-256" and sig["key_id"] == "k2"
    # source: RFC 2104 HMAC with SHA-256 (Python's hmac module) over "k2\n" + canonical JSON
    msg = b"k2\n" + model.canonical_bytes(signed)
    assert sig["value"] == hmac.new(KEYS[1]["k2"], msg, hashlib.sha256).hexdigest()
    # the signature field is not part of what is signed or checksummed
    assert model.checksum(signed) == art["checksum"]


@pytest.mark.parametrize(
    "tamper, ptr",
    [
        (
            lambda a: a["coefficients"].__setitem__(1, a["coefficients"][1] * 1.01),
            MODEL.at("signature", "value"),
        ),
        (lambda a: a["signature"].__setitem__("key_id", "k9"), MODEL.at("signature", "key_id")),
        (
            lambda a: a["signature"].__setitem__("algorithm", "HMAC-MD5"),
            MODEL.at("signature", "algorithm"),
        ),
        (lambda a: a.__setitem__("signature", {"algorithm": "none"}), MODEL.at("signature")),
    ],
    ids=["forged-coefficient", "unknown-key", "other-algorithm", "signature-removed"],
)
def test_tampered_signed_models_are_refused(issued, tamper, ptr):
    art, _, _ = issued
    forged = model.sign(copy.deepcopy(art), KEYS)
    tamper(forged)
    forged["checksum"] = model.checksum(forged)  # a forger can recompute the plain checksum
    with pytest.raises(InputError) as exc:
        load_model(forged, KEYS)
    assert exc.value.problems[0].where == ptr


def test_previous_key_still_verifies_and_unsigned_is_marked(issued):
    art, _, _ = issued
    old = model.sign(copy.deepcopy(art), ("k1", KEYS[1]))
    assert load_model(old, KEYS).coef.size == len(art["coefficients"])
    unsigned = model.sign(copy.deepcopy(art), None)
    assert (
        unsigned["signature"]["algorithm"] == "none"
        and "not signed" in unsigned["signature"]["note"]
    )
    load_model(unsigned, None)  # accepted where the service holds no key


def test_sign_all_reaches_every_model_in_a_response(issued):
    art, _, _ = issued
    body = {
        "ranking": [{"model": copy.deepcopy(art)}, {"model": copy.deepcopy(art)}],
        "groups": [{"ranking": [{"model": copy.deepcopy(art)}]}],
        "values": [1.0, 2.0],
    }
    model.sign_all(body, KEYS)
    models = [
        body["ranking"][0]["model"],
        body["ranking"][1]["model"],
        body["groups"][0]["ranking"][0]["model"],
    ]
    assert all(m["signature"]["key_id"] == "k2" for m in models)


def test_many_residuals_are_kept_as_evenly_spaced_quantiles():
    rng = np.random.default_rng(0)
    e = rng.normal(0, 1, 10 * model.MAX_STORED_RESIDUALS)
    kind, values = model.stored_residuals(e)
    assert kind == "quantiles" and len(values) == model.MAX_STORED_RESIDUALS
    # source: numpy.quantile (Hazen positions (k - 0.5)/m), the same order statistics
    m = model.MAX_STORED_RESIDUALS
    ref = np.quantile(e, (np.arange(m) + 0.5) / m, method="hazen")
    np.testing.assert_allclose(values, ref, rtol=1e-12, atol=1e-12)
    # the smearing factor of a log model barely moves (rel 1e-3, the spacing of the quantiles)
    assert np.mean(np.exp(values)) == pytest.approx(np.mean(np.exp(e)), rel=1e-3)
    kind, values = model.stored_residuals(e[:7])
    assert kind == "all" and values == e[:7].tolist()


def _reference_canon(v):
    """Every number a float, written out recursively (the definition the fast path keeps)."""
    if isinstance(v, dict):
        return {k: _reference_canon(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        return [_reference_canon(x) for x in v]
    if isinstance(v, bool) or v is None or isinstance(v, str):
        return v
    return float(v) if isinstance(v, (int, float)) else v


def test_canonical_bytes_keep_their_definition_on_long_number_lists(issued):
    art, _, _ = issued
    body = copy.deepcopy(art)
    body["extra"] = {
        "ints": [1, 2, 3],
        "flags": [True, False],
        "mixed": [1, 2.5, True, None],
        "floats": [0.1, 2.0],
        "folds": list(range(1, 6)) * 400,
    }
    body["residuals"]["values"] = [
        int(v) if i % 7 == 0 else v for i, v in enumerate(body["residuals"]["values"])
    ]
    clean = {k: v for k, v in body.items() if k not in model.UNSIGNED_FIELDS}
    # source: json.dumps(sort_keys, compact) of the recursive all-floats form
    ref = json.dumps(_reference_canon(clean), sort_keys=True, separators=(",", ":"))
    assert model.canonical_bytes(body) == ref.encode()


def _hmac_reference(body: dict, kid: str) -> str:
    """RFC 2104 HMAC-SHA-256 over the key id, a newline and the canonical JSON written out
    (json.dumps of the all-floats form, private bytes and unsigned fields left out)."""
    clean = {
        k: v for k, v in body.items() if k not in model.UNSIGNED_FIELDS and not isinstance(v, bytes)
    }
    text = json.dumps(_reference_canon(clean), sort_keys=True, separators=(",", ":"))
    return hmac.new(KEYS[1][kid], kid.encode() + b"\n" + text.encode(), hashlib.sha256).hexdigest()


def test_seal_keeps_the_bytes_it_checksummed_and_sign_uses_them_once(issued):
    art, _, _ = issued
    body = model.seal(copy.deepcopy(art), keep=True)
    # source: hashlib.sha256 over the written-out canonical JSON (test above)
    assert body["checksum"] == art["checksum"]
    assert body[model.CANONICAL] == model.canonical_bytes(art)
    # the kept bytes are no part of the canonical form
    assert model.checksum(body) == art["checksum"]
    model.sign(body, KEYS)
    assert model.CANONICAL not in body
    # source: RFC 2104 HMAC-SHA-256 via Python's hmac module over the written-out form
    assert body["signature"]["value"] == _hmac_reference(body, "k2")
    assert load_model(json.loads(json.dumps(body)), KEYS).coef.size == len(art["coefficients"])
    unsigned = model.sign(model.seal(copy.deepcopy(art), keep=True), None)
    assert model.CANONICAL not in unsigned and unsigned["signature"]["algorithm"] == "none"


def test_kept_bytes_that_no_longer_match_the_checksum_are_not_signed(issued):
    art, _, _ = issued
    body = model.seal(copy.deepcopy(art), keep=True)
    body["coefficients"][0] += 1.0
    body["checksum"] = model.checksum(body)  # changed and checksummed again, not resealed
    model.sign(body, KEYS)
    # source: RFC 2104 HMAC over the body as it is now, not the stale bytes
    assert body["signature"]["value"] == _hmac_reference(body, "k2")
    assert load_model(body, KEYS).coef[0] == pytest.approx(art["coefficients"][0] + 1.0)


def test_only_bytes_under_the_private_key_are_left_out_of_the_checksum(issued):
    art, _, _ = issued
    sent = copy.deepcopy(art)
    sent[model.CANONICAL] = "a string a client added"  # JSON: part of what is checked
    assert model.checksum(sent) != art["checksum"]
    with pytest.raises(InputError):
        load_model(sent, None)
