"""The model artifact's JSON form (service/api/render/model.py): what it stores, its canonical
form, checksum and HMAC signature, and the round trip through JSON back into a typed model
(service/api/artifact.py).

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
from service.api.artifact import MODEL, load_model
from service.api.encode import to_jsonable
from service.api.render import contract
from service.api.render import model as render
from service.core import model
from service.core.errors import InputError

from tests.core.test_model import depot_fit

KEYS = ("k2", {"k1": b"first key, retired soon", "k2": b"current key of this service"})


@pytest.fixture(scope="module")
def issued():
    concrete, design, fit, prep = depot_fit()
    typed = model.build_model(concrete, design, fit, prep, "test-version")
    art = contract(typed)  # sealed, not signed: as a diagnosed specification's model
    return art, design, prep, typed


def sign(typed: model.Model, keys) -> dict:
    """The artifact as a selection issues it, through the one JSON encoder of every exit."""
    return to_jsonable({"model": model.Signing(typed, keys)})["model"]


def test_stored_fit_equals_statsmodels(issued):
    art, design, prep, _ = issued
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
    art, _, _, _ = issued
    body = {k: v for k, v in art.items() if k not in ("checksum", "signature")}
    # source: hashlib.sha256 over json.dumps(sort_keys=True, separators=(",", ":")) with
    # every number as a float (so 63 and 63.0 give the same checksum)
    text = json.dumps(render._canon(body), sort_keys=True, separators=(",", ":"))
    assert art["checksum"] == hashlib.sha256(text.encode()).hexdigest()
    again = copy.deepcopy(art)
    again["n"] = float(again["n"])  # a client that writes numbers its own way
    assert render.checksum(again) == art["checksum"]
    again["n"] += 1
    assert render.checksum(again) != art["checksum"]


def test_json_round_trip_loads_the_same_model(issued):
    art, design, _, typed = issued
    signed = sign(typed, KEYS)
    wire = json.loads(json.dumps(signed, allow_nan=False))
    loaded = load_model(wire, KEYS)
    np.testing.assert_array_equal(loaded.coef, art["coefficients"])
    np.testing.assert_array_equal(loaded.xtx_inverse, np.array(art["xtx_inverse"]))
    assert list(loaded.terms) == design.names and loaded.residual_kind == "all"
    assert loaded.spec.to_dict() == art["specification"]


def test_signature_is_rfc2104_hmac_of_key_id_and_canonical_json(issued):
    art, _, _, typed = issued
    signed = sign(typed, KEYS)
    sig = signed["signature"]
    assert sig["algorithm"] == "HMAC-SHA-256" and sig["key_id"] == "k2"
    # source: RFC 2104 HMAC with SHA-256 (Python's hmac module) over "k2\n" + canonical JSON
    msg = b"k2\n" + render.canonical_bytes(signed)
    assert sig["value"] == hmac.new(KEYS[1]["k2"], msg, hashlib.sha256).hexdigest()
    # the signature field is not part of what is signed or checksummed
    assert render.checksum(signed) == art["checksum"]


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
    _, _, _, typed = issued
    forged = sign(typed, KEYS)
    tamper(forged)
    forged["checksum"] = render.checksum(forged)  # a forger can recompute the plain checksum
    with pytest.raises(InputError) as exc:
        load_model(forged, KEYS)
    assert exc.value.problems[0].where == ptr


def test_previous_key_still_verifies_and_unsigned_is_marked(issued):
    art, _, _, typed = issued
    old = sign(typed, ("k1", KEYS[1]))
    assert load_model(old, KEYS).coef.size == len(art["coefficients"])
    unsigned = sign(typed, None)
    assert (
        unsigned["signature"]["algorithm"] == "none"
        and "not signed" in unsigned["signature"]["note"]
    )
    load_model(unsigned, None)  # accepted where the service holds no key


def test_every_model_marked_in_a_response_is_signed_once_rendered(issued):
    _, _, _, typed = issued
    marked = model.Signing(typed, KEYS)
    body = {
        "ranking": [{"model": marked}, {"model": marked}],
        "groups": [{"ranking": [{"model": marked}]}],
        "values": [1.0, 2.0],
    }
    out = to_jsonable(body)
    models = [
        out["ranking"][0]["model"],
        out["ranking"][1]["model"],
        out["groups"][0]["ranking"][0]["model"],
    ]
    assert all(m["signature"]["key_id"] == "k2" for m in models)
    assert out["values"] == [1.0, 2.0]


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
    art, _, _, _ = issued
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
    clean = {k: v for k, v in body.items() if k not in render.UNSIGNED_FIELDS}
    # source: json.dumps(sort_keys, compact) of the recursive all-floats form
    ref = json.dumps(_reference_canon(clean), sort_keys=True, separators=(",", ":"))
    assert render.canonical_bytes(body) == ref.encode()


def _written_by_json(body: dict) -> bytes:
    clean = {k: v for k, v in body.items() if k not in render.UNSIGNED_FIELDS}
    # source: json.dumps(sort_keys, compact) of the recursive all-floats form
    return json.dumps(_reference_canon(clean), sort_keys=True, separators=(",", ":")).encode()


@pytest.mark.parametrize("scale", [1e-9, 1e-4, 0.05, 1.0, 3e3, 1e12, 1e15, 1e17, 1e300])
def test_long_number_lists_are_written_as_json_writes_them(issued, scale, monkeypatch):
    art, _, _, _ = issued
    body = copy.deepcopy(art)
    rng = np.random.default_rng(int(np.log10(scale)) + 400)
    plain = (rng.uniform(1, 9, 2000) * scale).tolist()  # no exponent from 1e-4 to 1e15
    plain[::50] = [0.0, -0.0, 9999999999999998.0 * min(scale, 1.0), 0.5] * 10
    body["residuals"]["values"] = plain
    body["extra"] = {
        "heavy": (rng.standard_t(3, 3000) * scale).tolist(),  # some below 1e-4 at most scales
        "rounded": np.round(rng.normal(0, 1e6, 500)).tolist(),
        "short": [0.5] * 40,
        "folds": list(range(1, 6)) * 400,
    }
    fast = []
    monkeypatch.setattr(
        render, "_positional", lambda v, f=render._positional: fast.append(f(v)) or fast[-1]
    )
    assert render.canonical_bytes(body) == _written_by_json(body)
    written = [t for t in fast if t is not None]
    assert len(written) >= (3 if 1e-4 <= scale <= 1e15 else 2)  # plain, rounded, short, folds


def test_a_non_finite_number_in_a_long_list_is_still_refused(issued):
    art, _, _, _ = issued
    body = copy.deepcopy(art)
    body["residuals"]["values"] = [0.5] * 100 + [float("nan")]
    with pytest.raises(ValueError):  # json.dumps(allow_nan=False), as before
        render.canonical_bytes(body)


def test_a_string_equal_to_a_placeholder_sends_the_body_through_json(issued, monkeypatch):
    art, _, _, _ = issued
    monkeypatch.setattr(render.secrets, "token_hex", lambda n: "f" * (2 * n))
    body = copy.deepcopy(art)
    body["extra"] = {"caller": "\x00" + "f" * 32 + ":0"}  # the first list's placeholder
    assert render.canonical_bytes(body) == _written_by_json(body)
    assert '"\\u0000' + "f" * 32 + ':0"' in _written_by_json(body).decode()


def _hmac_reference(body: dict, kid: str) -> str:
    """RFC 2104 HMAC-SHA-256 over the key id, a newline and the canonical JSON written out
    (json.dumps of the all-floats form, unsigned fields left out)."""
    clean = {k: v for k, v in body.items() if k not in render.UNSIGNED_FIELDS}
    text = json.dumps(_reference_canon(clean), sort_keys=True, separators=(",", ":"))
    return hmac.new(KEYS[1][kid], kid.encode() + b"\n" + text.encode(), hashlib.sha256).hexdigest()


def test_the_signature_covers_the_artifact_as_written(issued):
    art, _, _, typed = issued
    body = sign(typed, KEYS)
    # source: hashlib.sha256 over the written-out canonical JSON (test above)
    assert body["checksum"] == art["checksum"]
    # source: RFC 2104 HMAC-SHA-256 via Python's hmac module over the written-out form
    assert body["signature"]["value"] == _hmac_reference(body, "k2")
    assert load_model(json.loads(json.dumps(body)), KEYS).coef.size == len(art["coefficients"])
    unsigned = sign(typed, None)
    assert unsigned["signature"]["algorithm"] == "none"
    assert {k: v for k, v in unsigned.items() if k != "signature"} == art


def test_a_model_changed_and_checksummed_again_is_refused_by_its_signature(issued):
    _, _, _, typed = issued
    body = sign(typed, KEYS)
    body["coefficients"][0] += 1.0
    body["checksum"] = render.checksum(body)  # changed and checksummed again, not signed
    with pytest.raises(InputError) as exc:
        load_model(body, KEYS)
    assert exc.value.problems[0].where == MODEL.at("signature", "value")


def test_an_added_field_is_part_of_what_is_checked(issued):
    art, _, _, _ = issued
    sent = copy.deepcopy(art)
    sent["_canonical"] = "a string a client added"  # JSON: part of what is checked
    assert render.checksum(sent) != art["checksum"]
    with pytest.raises(InputError):
        load_model(sent, None)


def test_the_artifact_keeps_its_documented_layout(issued):
    art, _, prep, typed = issued
    assert list(sign(typed, KEYS)) == [
        "format_version",
        "service_version",
        "library_versions",
        "specification",
        "terms",
        "coefficients",
        "xtx_inverse",
        "residual_variance",
        "df_residual",
        "n",
        "levels",
        "residuals",
        "training_range",
        "response_range",
        "max_leverage",
        "data_fingerprint",
        "data_profile",
        "options",
        "checksum",
        "signature",
    ]
    prof = art["data_profile"]
    assert prof["rows"] == prep.n and list(prof["predictors"]) == ["pallets", "bay"]
    pallets = prof["predictors"]["pallets"]
    assert list(pallets) == ["kind", "edges", "shares", "mean", "median"]
    # source: numpy.quantile deciles (linear interpolation) and numpy median of the column
    x = prep.numeric["pallets"]
    q = np.quantile(x, np.linspace(0, 1, 11))
    assert pallets["edges"] == pytest.approx(q.tolist(), rel=1e-12)
    assert pallets["median"] == pytest.approx(float(np.median(x)), rel=1e-12)
    assert sum(pallets["shares"]) == pytest.approx(1.0)
    bay = prof["predictors"]["bay"]
    levels, counts = np.unique(prep.categorical["bay"], return_counts=True)
    assert bay == {
        "kind": "categorical",
        "shares": {str(k): c / prep.n for k, c in zip(levels, counts, strict=True)},
    }
    assert art["response_range"] == {"min": float(prep.y.min()), "max": float(prep.y.max())}


def test_cv_plus_fits_are_written_in_their_contract_form():
    from service.core import transforms as tr
    from service.core.cvplus import FoldPowers, NoStoredFits, StoredFits

    fits = StoredFits(
        coefficients=np.array([[1.0, 2.0], [1.5, 2.5]]),
        transforms=(tr.Transform("log"), tr.Transform("log")),
        fold=np.array([0, 1, 1]),
        abs_resid=np.array([0.1, 0.2, 0.3]),
        kind="all",
        scheme="random",
        rows=3,
        fold_powers=FoldPowers(("x",), (1,), np.array([[0.5], [0.25]]), True),
    )
    assert contract(fits) == {
        "available": True,
        "folds": 2,
        "scheme": "random",
        "rows": 3,
        "fold_fits": [
            {"response_transform": {"name": "log"}, "coefficients": [1.0, 2.0]},
            {"response_transform": {"name": "log"}, "coefficients": [1.5, 2.5]},
        ],
        "residuals": {"kind": "all", "fold": [0, 1, 1], "values": [0.1, 0.2, 0.3]},
        "fold_powers": {"columns": ["x"], "form": "box_cox", "values": [[0.5], [0.25]]},
    }
    assert contract(NoStoredFits("why")) == {"available": False, "reason": "why"}
