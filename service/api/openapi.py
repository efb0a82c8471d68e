"""The OpenAPI document: the framework's description of the routes, completed with response
schemas (service/api/responses.py), problem responses, the bearer scheme when a token is
configured, and request/response examples read from ``openapi_examples/`` (large examples are
trimmed to a few rows; a model artifact is kept whole so that its checksum still verifies).
"""

from __future__ import annotations

import copy
import json
import logging
from pathlib import Path
from typing import Any

from fastapi import FastAPI
from fastapi.openapi.utils import get_openapi

from ..settings import Settings
from . import responses as rs

log = logging.getLogger("bestscale")

EXAMPLES_DIR = Path(__file__).resolve().parents[2] / "openapi_examples"
DATA_ROWS = 40  # rows kept of an example's table
LIST_ITEMS = 3  # items kept of any other long list

DESCRIPTION = (
    "Chooses the scale (response and predictor transformations) on which to model a linear "
    "regression, scoring every candidate by K-fold cross-validated error on the original "
    "response scale and by tests of the regression conditions.\n\n"
    "Errors are RFC 9457 `application/problem+json` bodies whose `errors[].pointer` is a JSON "
    "Pointer into the request: 400 malformed JSON (NaN and Infinity are not JSON), 401 missing "
    "or wrong bearer token (when the service has one), 408 body not arrived whole in time, "
    "413 body over the size limit, 415 wrong "
    "content type, 422 content that cannot be used, 503 busy (all compute slots in use) or "
    "search budget exhausted, both with `Retry-After`. Every response carries `X-Request-ID` "
    "(the caller's, when it sent a valid one).\n\n"
    "Examples use invented data: repair costs of a regional water utility's mains."
)

TAGS = [
    {"name": "selection", "description": "search transformations and rank specifications"},
    {"name": "prediction", "description": "predictions on the original scale from a model"},
    {"name": "diagnostics", "description": "conditions and plot data for one specification"},
    {"name": "reference", "description": "the transform catalogue"},
    {"name": "operations", "description": "liveness and metrics"},
]

# (method, path) -> (response model, example stem, description of the 200 answer)
_OK = {
    ("post", "/v1/selections"): (
        rs.SelectionResponse,
        "selections",
        "the ranked specifications, best first",
    ),
    ("post", "/v1/predictions"): (
        rs.PredictionsResponse,
        "predictions",
        "one prediction per row, on the original scale",
    ),
    ("post", "/v1/diagnostics"): (
        rs.DiagnosticsResponse,
        "diagnostics",
        "the specification's entry and plot data (JSON), or a figure "
        "when Accept asks for image/svg+xml or image/png",
    ),
    ("get", "/v1/transforms"): (rs.TransformsResponse, "transforms", "the transform catalogue"),
    ("get", "/healthz"): (rs.HealthResponse, None, "the process is up"),
}

# request examples of endpoints that take another endpoint's body
_SAME_REQUEST = {"/v1/reports": "selections"}

_PROBLEMS = {
    "400": "malformed body: not JSON, not an object, or NaN/Infinity tokens",
    "408": "the body did not arrive whole in time (setting BESTSCALE_BODY_TIMEOUT_S)",
    "401": "missing or wrong 'Authorization: Bearer <token>'",
    "413": "the body is larger than the limit (setting BESTSCALE_MAX_BODY_BYTES)",
    "415": "the body is not application/json",
    "422": "the content cannot be used (including a key repeated in one JSON object); "
    "errors[].pointer says where",
    "503": "all compute slots are busy, or no candidate finished within the time limit; "
    "retry after the Retry-After seconds",
    "500": "the service failed; the body carries only the request id (no internals)",
}

_RETRY_AFTER = {
    "Retry-After": {
        "description": "seconds to wait before retrying",
        "schema": {"type": "integer", "minimum": 0},
    }
}
_REQUEST_ID = {
    "X-Request-ID": {
        "description": "the request id (echoed or generated)",
        "schema": {"type": "string"},
    }
}


def install(app: FastAPI, settings: Settings) -> None:
    """Replace ``app.openapi`` by :func:`build` (computed once, then kept)."""

    def openapi() -> dict:
        if app.openapi_schema is None:
            app.openapi_schema = build(app, settings)
        return app.openapi_schema

    app.openapi = openapi  # type: ignore[method-assign]  # FastAPI's documented override


def _load(name: str):
    path = EXAMPLES_DIR / name
    if not path.is_file():
        return None  # an installed package without the examples folder: no examples
    try:
        return json.loads(path.read_text())
    except ValueError:
        log.warning("example file %s is not JSON; left out of the OpenAPI document", name)
        return None


def trim(value, rows: int = DATA_ROWS, items: int = LIST_ITEMS, _key: str | None = None):
    """A shortened copy: tables keep ``rows`` rows, other lists ``items`` items, CSV text
    ``rows`` lines; anything under a ``model`` key is kept whole."""
    if _key == "model":
        return copy.deepcopy(value)
    if isinstance(value, dict):
        table = _key in ("columns",)
        return {
            k: (trim_list(v, rows) if table and isinstance(v, list) else trim(v, rows, items, k))
            for k, v in value.items()
        }
    if isinstance(value, list):
        keep = rows if _key == "records" else items
        return [trim(v, rows, items) for v in value[:keep]]
    if isinstance(value, str) and _key == "csv":
        return "\n".join(value.split("\n")[: rows + 1]) + "\n"
    return value


def trim_list(values: list, n: int) -> list:
    return copy.deepcopy(values[:n])


def _schema_components(doc: dict) -> None:
    comps = doc.setdefault("components", {}).setdefault("schemas", {})
    comps.pop("HTTPValidationError", None)
    comps.pop("ValidationError", None)
    for model in rs.RESPONSE_MODELS:
        schema = model.model_json_schema(ref_template="#/components/schemas/{model}")
        for name, sub in schema.pop("$defs", {}).items():
            comps.setdefault(name, sub)
        comps[model.__name__] = schema


def _problem_response(code: str) -> dict:
    out: dict[str, Any] = {
        "description": _PROBLEMS[code],
        "content": {
            "application/problem+json": {"schema": {"$ref": "#/components/schemas/Problem"}}
        },
        "headers": dict(_REQUEST_ID),
    }
    if code == "503":
        out["headers"].update(_RETRY_AFTER)
    return out


def build(app: FastAPI, settings: Settings) -> dict:
    doc = get_openapi(
        title=app.title,
        version=app.version,
        description=app.description,
        routes=app.routes,
        tags=app.openapi_tags,
    )
    _schema_components(doc)
    protected = settings.token() is not None
    if protected:
        doc["components"]["securitySchemes"] = {
            "bearer": {
                "type": "http",
                "scheme": "bearer",
                "description": "the service's API token (setting BESTSCALE_API_TOKEN)",
            }
        }
    for path, item in doc.get("paths", {}).items():
        for method, op in item.items():
            if not isinstance(op, dict) or "responses" not in op:
                continue
            needs_token = protected and (
                path.startswith("/v1/") or (path == "/metrics" and not settings.metrics_public)
            )
            _complete_operation(path, method, op, needs_token)
    return doc


#: operation ids a client generator turns into method names
OPERATION_IDS = {
    ("post", "/v1/selections"): "createSelection",
    ("post", "/v1/reports"): "createReport",
    ("post", "/v1/predictions"): "createPrediction",
    ("post", "/v1/diagnostics"): "createDiagnosis",
    ("get", "/v1/transforms"): "listTransforms",
    ("get", "/healthz"): "checkHealth",
    ("get", "/metrics"): "readMetrics",
}


def _complete_operation(path: str, method: str, op: dict, protected: bool) -> None:
    if (method, path) in OPERATION_IDS:
        op["operationId"] = OPERATION_IDS[(method, path)]
    responses = op["responses"]
    responses.pop("422", None)  # the framework's validation schema: we answer problems
    ok = _OK.get((method, path))
    if ok is not None:
        model, stem, text = ok
        content = {"schema": {"$ref": f"#/components/schemas/{model.__name__}"}}
        example = _load(f"{stem}.response.json") if stem else None
        if example is not None:
            content["example"] = trim(example)
        media = {"application/json": content}
        if path == "/v1/diagnostics":
            media["image/svg+xml"] = {"schema": {"type": "string"}}
            media["image/png"] = {"schema": {"type": "string", "format": "binary"}}
        responses["200"] = {"description": text, "content": media, "headers": dict(_REQUEST_ID)}
    elif path == "/metrics":
        responses["200"] = {
            "description": "Prometheus text exposition format (totals over every worker process)",
            "content": {"text/plain": {"schema": {"type": "string"}}},
            "headers": dict(_REQUEST_ID),
        }
    codes = []
    if protected:
        codes.append("401")
        op["security"] = [{"bearer": []}]
    if method in ("post", "put", "patch"):
        codes += ["400", "408", "413", "415", "422", "503"]
    codes.append("500")
    for code in codes:
        responses.setdefault(code, _problem_response(code))
    body = op.get("requestBody", {}).get("content", {}).get("application/json")
    stem = ok[1] if ok is not None else _SAME_REQUEST.get(path)
    if body is not None and stem is not None:
        example = _load(f"{stem}.request.json")
        if example is not None:
            body["examples"] = {
                "water_mains": {
                    "summary": "invented water-utility data (trimmed to a few rows)",
                    "value": trim(example),
                }
            }
