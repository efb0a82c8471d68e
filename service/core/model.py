"""The fitted-model artifact: everything needed to predict later without the data."""

from __future__ import annotations

import hashlib
import hmac
import json
from typing import Any

import numpy as np
import scipy
import statsmodels

from .data import Prepared
from .drift import profile
from .fitting import OLSFit
from .spec import Design, Specification

FORMAT_VERSION = 1
MAX_STORED_RESIDUALS = 2000


def stored_residuals(resid: np.ndarray) -> tuple[str, list[float]]:
    """All residuals for small n; otherwise MAX_STORED_RESIDUALS equally spaced order statistics.

    The smearing estimate is a mean over residuals, so a set of evenly spaced
    quantiles reproduces it to within the spacing of the empirical distribution.
    """
    if resid.size <= MAX_STORED_RESIDUALS:
        return "all", np.asarray(resid, dtype=float).tolist()
    s = np.sort(resid)
    pos = (np.arange(MAX_STORED_RESIDUALS) + 0.5) * s.size / MAX_STORED_RESIDUALS
    return "quantiles", np.interp(pos - 0.5, np.arange(s.size), s).tolist()


def _canon(v: Any) -> Any:
    """Numbers as floats, so a client that rewrites 63.0 as 63 (JavaScript) keeps the checksum."""
    if isinstance(v, dict):
        return {k: _canon(x) for k, x in v.items()}
    if isinstance(v, (list, tuple)):
        if all(type(x) is float for x in v):  # stored residuals and quantiles: thousands
            return list(v)
        if all(type(x) is int for x in v):  # fold numbers of out-of-fold residuals: thousands
            return [float(x) for x in v]
        return [_canon(x) for x in v]
    if isinstance(v, bool) or v is None or isinstance(v, str):
        return v
    if isinstance(v, (int, float)):
        return float(v)
    return v


UNSIGNED_FIELDS = ("checksum", "signature")
#: private key of an issued artifact: the canonical bytes its checksum was computed from, so
#: signing needs no second dump (bytes, which JSON cannot hold; never written out, as
#: ``to_jsonable`` drops private keys)
CANONICAL = "_canonical"


def canonical_bytes(body: dict[str, Any]) -> bytes:
    """The canonical JSON of the artifact without its checksum and signature fields."""
    clean = _canon(
        {
            k: v
            for k, v in body.items()
            if k not in UNSIGNED_FIELDS and not (k == CANONICAL and isinstance(v, bytes))
        }
    )
    text = json.dumps(clean, sort_keys=True, separators=(",", ":"), allow_nan=False)
    return text.encode()


def checksum(body: dict[str, Any]) -> str:
    """SHA-256 over the canonical JSON: detects accidental changes, not forgery."""
    return hashlib.sha256(canonical_bytes(body)).hexdigest()


def seal(body: dict[str, Any], keep: bool = False) -> dict[str, Any]:
    """Set the artifact's ``checksum`` in place from one canonical dump; ``keep``: also keep
    those bytes (private key :data:`CANONICAL`) for :func:`sign`, which drops them (for a
    body that is signed before it leaves).  Call it once the artifact is complete; whatever
    changes it afterwards must seal it again."""
    raw = canonical_bytes(body)
    body["checksum"] = hashlib.sha256(raw).hexdigest()
    if keep:
        body[CANONICAL] = raw
    return body


def _sealed_bytes(body: dict[str, Any]) -> bytes:
    """The canonical bytes :func:`seal` kept (removed from the body) when they still match
    the body's checksum, else a fresh dump."""
    raw = body.pop(CANONICAL, None)
    if isinstance(raw, bytes) and hashlib.sha256(raw).hexdigest() == body.get("checksum"):
        return raw
    return canonical_bytes(body)


SIGNATURE_ALGORITHM = "HMAC-SHA-256"
UNSIGNED_NOTE = (
    "the service that issued this model holds no model key (BESTSCALE_MODEL_KEY), so the "
    "model is not signed and anyone can forge one its checksum accepts"
)


def signature_value(body: dict[str, Any], key_id: str, key: bytes, raw: bytes | None = None) -> str:
    """HMAC-SHA-256 (RFC 2104) with ``key`` over the key id, a newline and the canonical JSON
    (``raw``: those bytes when the caller has them)."""
    msg = key_id.encode() + b"\n" + (canonical_bytes(body) if raw is None else raw)
    return hmac.new(key, msg, hashlib.sha256).hexdigest()


def sign(body: dict[str, Any], keys: tuple[str, dict[str, bytes]] | None) -> dict[str, Any]:
    """Add the ``signature`` field in place: keyed with the current key, or marked unsigned
    (the canonical bytes of :func:`seal` are used and dropped)."""
    if keys is None:
        body.pop(CANONICAL, None)
        body["signature"] = {"algorithm": "none", "key_id": None, "value": None}
        body["signature"]["note"] = UNSIGNED_NOTE
        return body
    kid, ring = keys
    raw = _sealed_bytes(body)
    body["signature"] = {
        "algorithm": SIGNATURE_ALGORITHM,
        "key_id": kid,
        "value": signature_value(body, kid, ring[kid], raw),
    }
    return body


def sign_all(node: object, keys: tuple[str, dict[str, bytes]] | None) -> None:
    """Sign every model artifact in a response body (``ranking[i].model``, grouped too)."""
    stack = [node]
    while stack:
        cur = stack.pop()
        if isinstance(cur, dict):
            for k, v in cur.items():
                if k == "model" and isinstance(v, dict) and "format_version" in v:
                    sign(v, keys)
                elif isinstance(v, (dict, list)) and not k.startswith("_"):
                    stack.append(v)
        elif isinstance(cur, list) and cur and isinstance(cur[0], (dict, list)):
            stack.extend(x for x in cur if isinstance(x, (dict, list)))  # not number arrays


def library_versions() -> dict[str, Any]:
    """Versions of the numerical libraries that produced the artifact."""
    return {
        "numpy": np.__version__,
        "scipy": scipy.__version__,
        "statsmodels": statsmodels.__version__,
    }


def build_model(
    spec: Specification,
    design: Design,
    fit: OLSFit,
    prep: Prepared,
    service_version: str,
    options: dict[str, Any] | None = None,
    cv_plus: dict[str, Any] | None = None,
    conditions_failed: list[str] | None = None,
    sealed: bool = True,
) -> dict[str, Any]:
    """The artifact.  ``cv_plus``: the block of :func:`cvplus.stored_block` (fold fits and
    out-of-fold residuals, or why there are none); ``conditions_failed``: the entry's
    conditions that do not hold, which decide the default prediction interval; ``sealed``:
    with its checksum (:func:`seal`; False when the caller completes it and seals it)."""
    kind, res = stored_residuals(fit.resid)
    hat = np.einsum("ij,jk,ik->i", design.X, fit.cov_unscaled, design.X)
    ranges = {}
    for t in design.terms:
        if t.kind == "numeric" and t.raw is not None:
            ranges[t.column] = {"min": float(np.min(t.raw)), "max": float(np.max(t.raw))}
    body = {
        "format_version": FORMAT_VERSION,
        "service_version": service_version,
        "library_versions": library_versions(),
        "specification": spec.to_dict(),
        "terms": list(design.names),
        "coefficients": [float(v) for v in fit.coef],
        "xtx_inverse": [[float(v) for v in row] for row in fit.cov_unscaled],
        "residual_variance": float(fit.sigma**2),
        "df_residual": int(fit.df_resid),
        "n": int(fit.n),
        "levels": design.levels,
        "residuals": {"kind": kind, "values": res},
        "training_range": ranges,
        "response_range": {"min": float(np.min(prep.y)), "max": float(np.max(prep.y))},
        "max_leverage": float(np.max(hat)),
        "data_fingerprint": prep.fingerprint(),
        # what the training rows looked like, so a later run can measure drift (core/drift.py)
        "data_profile": profile(prep, [p.column for p in spec.predictors]),
        "options": options or {},
    }
    if conditions_failed is not None:
        body["conditions_failed"] = list(conditions_failed)
    if cv_plus is not None:
        body["cv_plus"] = cv_plus
    return seal(body) if sealed else body
