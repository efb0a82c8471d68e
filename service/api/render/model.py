"""Contract form of the model artifact (``ranking[i].model``): the fitted model's fields,
its CV+ fold fits and the training rows' profile, sealed with a SHA-256 checksum over the
canonical JSON and signed with HMAC-SHA-256 (RFC 2104) under the service's model key, or
marked unsigned.  :mod:`service.api.artifact` reads an artifact back.

Key order is the documented layout; the checksum and signature cover the canonical form
(keys sorted, compact, every number a float), so the order is no part of what is signed.
"""

from __future__ import annotations

import hashlib
import hmac
import json
import secrets
from typing import Any

import numpy as np
import orjson

from ...core import cvplus
from ...core import drift as d
from ...core import model as m
from .registry import contract

UNSIGNED_FIELDS = ("checksum", "signature")
SIGNATURE_ALGORITHM = "HMAC-SHA-256"
UNSIGNED_NOTE = (
    "the service that issued this model holds no model key (BESTSCALE_MODEL_KEY), so the "
    "model is not signed and anyone can forge one its checksum accepts"
)


#: number lists at least this long are written by orjson (the rest of the artifact by json)
FAST_LIST = 32


def _positional(values: list[float]) -> bytes | None:
    """``values`` as ``json.dumps`` writes them, by orjson: both write the shortest digits
    that read back to each float, and the same text wherever Python's ``repr`` writes no
    exponent (0, or 1e-4 <= |x| < 1e16).  None for any other list (an exponent, which the
    two write differently, or a non-finite number, which json refuses)."""
    size = np.abs(np.asarray(values, dtype=float))
    if not np.all((size == 0.0) | ((size >= 1e-4) & (size < 1e16))):  # NaN: False
        return None
    out = orjson.dumps(values)
    return None if b"e" in out else out


def _canon(v: Any, fast: dict[str, bytes] | None = None, tag: str = "") -> Any:
    """Numbers as floats, so a client that rewrites 63.0 as 63 (JavaScript) keeps the checksum.

    With ``fast``, a long list of numbers that orjson writes as json would is left out: a
    placeholder string (``tag`` and a counter) stands in its place and ``fast`` keeps its
    text under that placeholder."""
    if isinstance(v, dict):
        return {k: _canon(x, fast, tag) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        out: list[Any] | None = None
        kinds = set(map(type, v))  # one C-level pass over thousands of numbers
        if kinds <= {float}:  # stored residuals and quantiles: thousands
            out = list(v)
        elif kinds == {int}:  # fold numbers of out-of-fold residuals: thousands
            out = [float(x) for x in v]
        if out is None:
            return [_canon(x, fast, tag) for x in v]
        if fast is not None and len(out) >= FAST_LIST:
            text = _positional(out)
            if text is not None:
                token = f"{tag}:{len(fast)}"
                fast[token] = text
                return token
        return out
    if isinstance(v, bool) or v is None or isinstance(v, str):
        return v
    if isinstance(v, (int, float)):
        return float(v)
    return v


def _dumps(clean: Any) -> bytes:
    return json.dumps(clean, sort_keys=True, separators=(",", ":"), allow_nan=False).encode()


def canonical_bytes(body: dict[str, Any]) -> bytes:
    """The canonical JSON of an artifact without its checksum and signature fields: the
    all-floats form written by ``json.dumps`` with sorted keys and no spaces.

    Long number lists (stored residuals, fold numbers) are written by orjson where its text
    is json's (:func:`_positional`) and put in place of a placeholder that holds a random
    tag; a placeholder found other than exactly once (a caller string equal to it) sends
    the whole body through ``json.dumps``."""
    kept = {k: v for k, v in body.items() if k not in UNSIGNED_FIELDS}
    fast: dict[str, bytes] = {}
    text = _dumps(_canon(kept, fast, "\x00" + secrets.token_hex(16)))
    for token, numbers in fast.items():
        quoted = _dumps(token)
        if text.count(quoted) != 1:
            return _dumps(_canon(kept))
        text = text.replace(quoted, numbers)
    return text


def checksum(body: dict[str, Any]) -> str:
    """SHA-256 over the canonical JSON: detects accidental changes, not forgery."""
    return hashlib.sha256(canonical_bytes(body)).hexdigest()


def signature_value(body: dict[str, Any], key_id: str, key: bytes, raw: bytes | None = None) -> str:
    """HMAC-SHA-256 (RFC 2104) with ``key`` over the key id, a newline and the canonical JSON
    (``raw``: those bytes when the caller has them)."""
    msg = key_id.encode() + b"\n" + (canonical_bytes(body) if raw is None else raw)
    return hmac.new(key, msg, hashlib.sha256).hexdigest()


@contract.register
def library_versions(v: m.LibraryVersions) -> dict[str, Any]:
    return {"numpy": v.numpy, "scipy": v.scipy, "statsmodels": v.statsmodels}


@contract.register
def fit_options(o: m.FitOptions) -> dict[str, Any]:
    return {"folds": o.folds, "repeats": o.repeats, "seed": o.seed, "metric": o.metric}


@contract.register
def numeric_profile(p: d.NumericProfile) -> dict[str, Any]:
    return {"edges": list(p.edges), "shares": list(p.shares), "mean": p.mean, "median": p.median}


@contract.register
def categorical_profile(p: d.CategoricalProfile) -> dict[str, Any]:
    return {"shares": dict(p.shares)}


@contract.register
def data_profile(p: d.DataProfile) -> dict[str, Any]:
    preds: dict[str, Any] = {}
    for column, prof in p.predictors:
        if isinstance(prof, d.NumericProfile):
            preds[column] = {"kind": "numeric", **numeric_profile(prof)}
        else:
            preds[column] = {"kind": "categorical", **categorical_profile(prof)}
    return {"rows": p.rows, "response": numeric_profile(p.response), "predictors": preds}


@contract.register
def fold_powers(f: cvplus.FoldPowers) -> dict[str, Any]:
    return {
        "columns": list(f.columns),
        "form": cvplus.POWER_FORMS[0] if f.boxcox_form else cvplus.POWER_FORMS[1],
        "values": f.powers.tolist(),
    }


@contract.register
def no_stored_fits(s: cvplus.NoStoredFits) -> dict[str, Any]:
    return {"available": False, "reason": s.reason}


@contract.register
def stored_fits(s: cvplus.StoredFits) -> dict[str, Any]:
    out: dict[str, Any] = {
        "available": True,
        "folds": s.folds,
        "scheme": s.scheme,
        "rows": s.rows,
        "fold_fits": [
            {"response_transform": t.to_dict(), "coefficients": c}
            for t, c in zip(s.transforms, s.coefficients.tolist(), strict=True)
        ],
        "residuals": {"kind": s.kind, "fold": s.fold.tolist(), "values": s.abs_resid.tolist()},
    }
    if s.fold_powers is not None:
        out["fold_powers"] = fold_powers(s.fold_powers)
    return out


def artifact(model: m.Model) -> dict[str, Any]:
    """The artifact of an issued ``model`` without its checksum and signature, in plain
    JSON values (what the checksum is computed over)."""
    issued = model.issued
    if issued is None:
        raise ValueError("a model read back from an artifact is not issued again")
    lo, hi = issued.response_range
    out: dict[str, Any] = {
        "format_version": model.format_version,
        "service_version": issued.service_version,
        "library_versions": library_versions(issued.library_versions),
        "specification": model.spec.to_dict(),
        "terms": list(model.terms),
        "coefficients": model.coef.tolist(),
        "xtx_inverse": model.xtx_inverse.tolist(),
        "residual_variance": model.residual_variance,
        "df_residual": model.df_residual,
        "n": model.n,
        "levels": {
            c: {"levels": list(lv.levels), "reference": lv.reference}
            for c, lv in model.levels.items()
        },
        "residuals": {"kind": model.residual_kind, "values": model.residuals.tolist()},
        "training_range": {c: {"min": a, "max": b} for c, (a, b) in model.training_range.items()},
        "response_range": {"min": lo, "max": hi},
        "max_leverage": model.max_leverage,
        "data_fingerprint": issued.data_fingerprint,
        "data_profile": None if model.profile is None else data_profile(model.profile),
        "options": {} if issued.options is None else fit_options(issued.options),
    }
    if model.conditions_failed is not None:
        out["conditions_failed"] = list(model.conditions_failed)
    if model.cv_store is not None:
        out["cv_plus"] = contract(model.cv_store)
    return out


def sealed(model: m.Model) -> tuple[dict[str, Any], bytes]:
    """The artifact with its ``checksum``, and the canonical bytes it was computed from."""
    body = artifact(model)
    raw = canonical_bytes(body)
    body["checksum"] = hashlib.sha256(raw).hexdigest()
    return body, raw


@contract.register
def model(model: m.Model) -> dict[str, Any]:
    """The artifact with its checksum and no signature (a diagnosed specification's model,
    which is not issued for prediction: only a selection's models are signed)."""
    return sealed(model)[0]


def sign(
    body: dict[str, Any], keys: tuple[str, dict[str, bytes]] | None, raw: bytes | None = None
) -> dict[str, Any]:
    """Add the ``signature`` field to a sealed artifact in place: keyed with the current key,
    or marked unsigned (``raw``: the canonical bytes when the caller has them)."""
    if keys is None:
        body["signature"] = {"algorithm": "none", "key_id": None, "value": None}
        body["signature"]["note"] = UNSIGNED_NOTE
        return body
    kid, ring = keys
    body["signature"] = {
        "algorithm": SIGNATURE_ALGORITHM,
        "key_id": kid,
        "value": signature_value(body, kid, ring[kid], raw),
    }
    return body


@contract.register
def signing(s: m.Signing) -> dict[str, Any]:
    """The artifact as it leaves the service: sealed, then signed with the current key or
    marked unsigned (one canonical dump serves both)."""
    body, raw = sealed(s.model)
    return sign(body, s.keys, raw)
