"""RFC 9457 problem details: one place that maps every known error to a response.

Layers: the outer middleware (service/api/middleware.py) turns anything unexpected into a bare
500 problem carrying only the request id; the handlers installed here map the known error
classes (validation, domain errors, HTTP errors, the web layer's own problems) to 4xx/503
problems whose ``errors[].pointer`` is a JSON Pointer (RFC 6901) into the request.  Errors of
the core name their places in domain terms; ``pointers.pointer_of`` spells them for the
endpoint that was called.  Every RFC 9457 body is built here (``problem_body`` for HTTP
answers, ``problem_object`` for the problems a group or a batch segment carries in its body).
"""

from __future__ import annotations

import json
import logging
import re
from collections.abc import Sequence
from typing import Any

import orjson
from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from starlette.exceptions import HTTPException as StarletteHTTPException
from starlette.responses import Response

from ..core.errors import BestscaleError, BudgetError, ErrorRecord, InputError, ModelFailure
from ..core.numbers import row_number
from ..selection.groups import GroupFailure
from .metrics import REJECTED
from .pointers import SELECTIONS, endpoint_of, error_items

log = logging.getLogger("bestscale")
PROBLEM = "application/problem+json"
TYPE_PREFIX = "urn:bestscale:problem:"
MAX_ERRORS_LISTED = 50
MAX_DETAIL_CHARS = 2000
BUDGET_RETRY_AFTER_S = 5


class ProblemError(Exception):
    """An HTTP-level problem raised by the web layer itself (size, media type, auth, busy)."""

    def __init__(
        self,
        status: int,
        kind: str,
        title: str,
        detail: str,
        errors: list[dict] | None = None,
        headers: dict | None = None,
    ):
        super().__init__(detail)
        self.status, self.kind, self.title, self.detail = status, kind, title, detail
        self.errors = errors or []
        self.headers = headers or {}


def _clip(text: str) -> str:
    text = str(text)
    return text if len(text) <= MAX_DETAIL_CHARS else text[: MAX_DETAIL_CHARS - 1] + "…"


def problem_body(
    status: int,
    kind: str,
    title: str,
    detail: str,
    errors: list[dict] | None = None,
    request_id: str | None = None,
    instance: str | None = None,
) -> dict:
    """The problem object; long details are clipped and long error lists capped."""
    items = [{"pointer": e["pointer"], "detail": _clip(e["detail"])} for e in (errors or [])]
    body = {
        "type": TYPE_PREFIX + kind,
        "title": title,
        "status": status,
        "detail": _clip(detail),
        "errors": items[:MAX_ERRORS_LISTED],
    }
    if len(items) > MAX_ERRORS_LISTED:
        body["errors_truncated"] = len(items) - MAX_ERRORS_LISTED
    if request_id:
        body["request_id"] = request_id
    if instance:
        body["instance"] = instance
    if 400 <= status < 500 or status == 503:
        REJECTED.labels(kind).inc()
    return body


def problem_object(
    status: int, kind: str, title: str, detail: str, errors: list[dict] | None = None
) -> dict:
    """The problem a group or a batch segment carries in its body (no request id, no
    metrics: the request that holds it answers 200)."""
    return {
        "type": TYPE_PREFIX + kind,
        "title": title,
        "status": status,
        "detail": detail,
        "errors": list(errors or []),
    }


def record_problem(rec: ErrorRecord, endpoint: str = SELECTIONS) -> dict:
    """The problem object of an error the core raised on purpose and a group or segment
    kept as an :class:`ErrorRecord` (503 when the time ran out, else 422)."""
    status = 503 if rec.over_budget else 422
    return problem_object(
        status, rec.kind, rec.title, rec.detail, error_items(rec.problems, endpoint)
    )


def group_problem(failure: GroupFailure, endpoint: str = SELECTIONS) -> dict:
    """The entry of a group (or batch segment) that could not be modelled: its problem."""
    return {"problem": record_problem(failure.record, endpoint)}


def with_group_problems(body: Any) -> Any:
    """A selections ``body`` with every group that could not be modelled (a
    :class:`GroupFailure`) written as its problem entry."""
    groups = body.get("groups") if isinstance(body, dict) else getattr(body, "groups", None)
    if isinstance(groups, dict):
        for name, gbody in groups.items():
            if isinstance(gbody, GroupFailure):
                groups[name] = group_problem(gbody, SELECTIONS)
    return body


def problem_bytes(
    status: int,
    kind: str,
    title: str,
    detail: str,
    request_id: str | None = None,
    errors: list[dict] | None = None,
    instance: str | None = None,
) -> bytes:
    return orjson.dumps(problem_body(status, kind, title, detail, errors, request_id, instance))


def internal_error_bytes(request_id: str, instance: str | None = None) -> bytes:
    """The bare 500: no exception text, no traceback; the request id ties it to the log line."""
    return problem_bytes(
        500,
        "internal",
        "Internal error",
        "the service failed on this request; quote the request id when reporting it",
        request_id,
        instance=instance,
    )


def problem(
    status: int,
    kind: str,
    title: str,
    detail: str,
    errors: list[dict] | None = None,
    headers: dict | None = None,
    request: Request | None = None,
) -> Response:
    rid = instance = None
    if request is not None:
        rid = request.scope.get("state", {}).get("request_id")
        instance = request.url.path
    return Response(
        problem_bytes(status, kind, title, detail, rid, errors, instance),
        status_code=status,
        media_type=PROBLEM,
        headers=headers,
    )


def _pointer_from_loc(loc: tuple, body) -> str:
    """JSON Pointer for a pydantic error location, skipping union/type tags."""
    parts: list[str] = []
    node = body
    for item in loc:
        if item == "body" and not parts and node is body:
            continue
        if isinstance(node, dict) and isinstance(item, str) and item in node:
            node = node[item]
            parts.append(item)
        elif isinstance(node, list) and isinstance(item, int) and 0 <= item < len(node):
            node = node[item]
            parts.append(str(item))
        elif (
            isinstance(node, dict)
            and isinstance(item, str)
            and "[" not in item
            and "," not in item
            and not item.startswith("function-")
        ):
            parts.append(item)  # a missing field: point where it belongs
            node = None
        # otherwise a union member tag such as "str" or "TransformIn": not part of the path
    return "/" + "/".join(p.replace("~", "~0").replace("/", "~1") for p in parts) if parts else ""


def _shown(value: object, limit: int = 60) -> str:
    """The value the caller sent, as JSON, cut to ``limit`` characters."""
    try:
        text = json.dumps(value, ensure_ascii=False, allow_nan=False)
    except (TypeError, ValueError):
        text = repr(value)
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _count(n: object, one: str, many: str) -> str:
    return f"{n} {one if n == 1 else many}"


def _choices(expected: str) -> str:
    return expected.replace("'", '"')


_DATA_ROW = re.compile(r"^/data/(?:records/(\d+)|columns/[^/]+/(\d+))(?:/|$)")


def _row_note(ptr: str) -> str:
    """`` (row 4, counting from 1)`` for a pointer into a data row, else ``""``."""
    m = _DATA_ROW.match(ptr)
    if m is None:
        return ""
    return f" (row {row_number(int(m.group(1) or m.group(2)))}, counting from 1)"


def _message(err: dict) -> str:
    """One error of the request schema in our words: what was expected, what was sent, and
    (where it is not obvious) how to fix it."""
    kind = err.get("type", "")
    ctx = err.get("ctx") or {}
    got = _shown(err.get("input"))
    field = err["loc"][-1] if err.get("loc") else "field"
    if kind == "extra_forbidden":
        return f"unknown field '{field}': remove it (every field is listed in the API reference)"
    if kind == "missing":
        return f"field '{field}' is required"
    if kind == "finite_number":
        return (
            "must be a finite number (NaN and Infinity are not accepted; send null for a "
            "missing data value)"
        )
    if kind in ("int_type", "int_parsing", "int_from_float"):
        return f"expected a whole number such as 5, got {got}"
    if kind in ("float_type", "float_parsing"):
        return f"expected a number such as 0.05, got {got}"
    if kind in ("bool_type", "bool_parsing"):
        return f"expected true or false, got {got}"
    if kind == "string_type":
        return f"expected text (a JSON string), got {got}"
    if kind == "list_type":
        return f"expected a list such as [...], got {got}"
    if kind in ("dict_type", "model_type", "model_attributes_type"):
        return f"expected an object such as {{...}}, got {got}"
    if kind == "greater_than_equal":
        return f"must be at least {ctx.get('ge')}, got {got}"
    if kind == "greater_than":
        return f"must be greater than {ctx.get('gt')}, got {got}"
    if kind == "less_than_equal":
        return f"must be at most {ctx.get('le')}, got {got}"
    if kind == "less_than":
        return f"must be less than {ctx.get('lt')}, got {got}"
    if kind in ("literal_error", "enum"):
        return f"must be one of {_choices(str(ctx.get('expected', '')))}, got {got}"
    if kind == "string_too_short":
        least = ctx.get("min_length", 1)
        if least == 1:
            return "must not be empty"
        return f"must have at least {_count(least, 'character', 'characters')}, got {got}"
    if kind == "string_too_long":
        most = ctx.get("max_length")
        return (
            f"must have at most {_count(most, 'character', 'characters')}; the value sent has "
            f"{len(str(err.get('input', '')))}"
        )
    if kind == "too_short":
        least = ctx.get("min_length", 1)
        return f"must hold at least {_count(least, 'item', 'items')}, got {got}"
    if kind == "too_long":
        most = ctx.get("max_length")
        actual = ctx.get("actual_length")
        tail = f"; the value sent has {actual}" if actual is not None else ""
        return f"must hold at most {_count(most, 'item', 'items')}{tail}"
    msg = err.get("msg", "invalid value")
    if msg.startswith("Value error, "):
        msg = msg[len("Value error, ") :]
    return msg


def validation_items(errs: Sequence[Any], body: object) -> list[dict]:
    """The schema errors of one request as ``[{pointer, detail}]`` in our words, repeats
    removed (shared by the HTTP handler and the command line)."""
    items = []
    seen = set()
    for e in errs:
        ptr = _pointer_from_loc(tuple(e.get("loc", ())), body)
        text = _message(e) + _row_note(ptr)
        if (ptr, text) in seen:
            continue
        seen.add((ptr, text))
        items.append({"pointer": ptr, "detail": text})
    return items


def install(app: FastAPI) -> None:
    @app.exception_handler(RequestValidationError)
    async def _validation(request: Request, exc: RequestValidationError):
        errs = exc.errors()
        if errs and errs[0].get("type") == "json_invalid":
            pos = errs[0].get("loc", ("body", 0))[-1]
            return problem(
                400,
                "malformed-body",
                "Malformed JSON body",
                f"the body is not valid JSON (near character {pos}); NaN and Infinity "
                "are not JSON: send null for a missing value",
                request=request,
            )
        body = exc.body if hasattr(exc, "body") else None
        items = validation_items(errs, body)
        if body is None or not isinstance(body, dict):
            return problem(
                400,
                "malformed-body",
                "Malformed request body",
                "the body must be a JSON object",
                items,
                request=request,
            )
        detail = items[0]["detail"] if len(items) == 1 else f"{len(items)} fields are invalid"
        if len(items) == 1 and items[0]["pointer"]:
            detail = f"{items[0]['pointer']}: {items[0]['detail']}"
        return problem(
            422, "invalid-input", "Invalid request content", detail, items, request=request
        )

    @app.exception_handler(ProblemError)
    async def _problem(request: Request, exc: ProblemError):
        return problem(
            exc.status, exc.kind, exc.title, exc.detail, exc.errors, exc.headers, request=request
        )

    @app.exception_handler(BestscaleError)
    async def _domain(request: Request, exc: BestscaleError):
        status = 503 if isinstance(exc, BudgetError) else 422
        headers = (
            {"Retry-After": str(BUDGET_RETRY_AFTER_S)} if isinstance(exc, BudgetError) else None
        )
        errors = error_items(exc.problems, endpoint_of(request.url.path))
        kind = exc.kind if isinstance(exc, (InputError, ModelFailure, BudgetError)) else "error"
        return problem(status, kind, exc.title, exc.detail, errors, headers, request=request)

    @app.exception_handler(StarletteHTTPException)
    async def _http(request: Request, exc: StarletteHTTPException):
        # the body problems of service.api.middleware carry their own kind and title
        titles = {404: "Not found", 405: "Method not allowed", 413: "Request body too large"}
        kinds = {404: "not-found", 405: "method-not-allowed", 413: "too-large"}
        return problem(
            exc.status_code,
            getattr(exc, "kind", None) or kinds.get(exc.status_code, "http"),
            getattr(exc, "title", None) or titles.get(exc.status_code, "HTTP error"),
            str(exc.detail),
            headers=getattr(exc, "headers", None),
            request=request,
        )

    @app.exception_handler(Exception)
    async def _unexpected(request: Request, exc: Exception):
        # Last resort only: service.api.middleware.ServiceMiddleware answers unexpected errors of
        # the application; this catches a failure of the middleware itself.
        log.error(
            "unhandled error outside the service middleware",
            exc_info=exc,
            extra={"fields": {"path": request.url.path}},
        )
        rid = request.scope.get("state", {}).get("request_id") or ""
        return Response(
            internal_error_bytes(rid, request.url.path), status_code=500, media_type=PROBLEM
        )
