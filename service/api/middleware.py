"""Pure ASGI middleware, outermost first:

``ServiceMiddleware``  request id (accepted or generated, echoed), one JSON access line and
                       the request metrics per request, no ``Server`` header, and the outer
                       guard that turns any unexpected exception into a bare 500 problem
                       (request id only, no traceback) while logging the traceback.
(CORS, when origins are configured, sits between the two so that preflights and the
 problems below carry its headers.)
``GuardMiddleware``    a request with both Content-Length and Transfer-Encoding (or two
                       Content-Lengths) refused, bearer token on ``/v1/*`` (and on
                       ``/metrics`` and the API documentation when they are not public),
                       body-size limit (Content-Length checked before anything is read,
                       streamed bytes counted as they arrive), and an early 503 for
                       ``POST /v1/*`` while every compute slot is busy.

Every response carries ``X-Content-Type-Options: nosniff``; every response that is neither
JSON nor the documentation pages (SVG, PNG, HTML report, plain text) also carries a
Content-Security-Policy that forbids scripts and fetches unless the route set its own.
"""

from __future__ import annotations

import contextvars
import hmac
import logging
import re
import time
import uuid
from collections.abc import Callable, Iterable

import anyio
from starlette.exceptions import HTTPException as StarletteHTTPException
from starlette.middleware.cors import CORSMiddleware
from starlette.responses import Response

from . import pool
from .encode import to_jsonable
from .errors import PROBLEM, internal_error_bytes, problem_bytes
from .logs import REQUEST_ID
from .metrics import CANDIDATES, ERRORS, IN_FLIGHT, LATENCY, REQUESTS, ROWS

log = logging.getLogger("bestscale.access")
errlog = logging.getLogger("bestscale.error")

_ID_OK = re.compile(r"^[A-Za-z0-9._:-]{1,128}$")
DOC_PATHS = ("/docs", "/redoc", "/openapi.json", "/docs/oauth2-redirect")
CSP_STATIC = "default-src 'none'; style-src 'unsafe-inline'; img-src data:; frame-ancestors 'self'"


def _security_headers(path: str, headers: list) -> list:
    """nosniff on every response; a restrictive CSP on non-JSON responses without one."""
    names = {k.lower() for k, _ in headers}
    out = list(headers)
    if b"x-content-type-options" not in names:
        out.append((b"x-content-type-options", b"nosniff"))
    ctype = next((v for k, v in headers if k.lower() == b"content-type"), b"").lower()
    is_json = b"json" in ctype
    is_doc = path in DOC_PATHS or path.startswith("/docs/")
    if not is_json and not is_doc and b"content-security-policy" not in names:
        out.append((b"content-security-policy", CSP_STATIC.encode()))
    return out


_RECORD: contextvars.ContextVar[dict | None] = contextvars.ContextVar(
    "bestscale_request_record", default=None
)


def note(**fields) -> None:
    """Add fields (e.g. ``rows``, ``candidates``) to the current request's access-log line.

    Safe to call from a ``def`` route: the framework copies the request's context into the
    worker thread, and the record is one shared dict.  Outside a request it does nothing.
    """
    record = _RECORD.get()
    if record is not None:
        record.update({k: v for k, v in fields.items() if v is not None})


def note_result(body: dict) -> None:
    """Record the rows used and candidates scored of a response body (selection, grouped
    selection, diagnostics or predictions; typed parts read in their contract form) for
    the access log and the metrics."""
    if not isinstance(body, dict):
        if not hasattr(body, "search"):
            return
        # a typed selection body: its parts as the dict reads below take them
        body = {"data": body.data, "search": body.search, "groups": getattr(body, "groups", None)}
    data = to_jsonable(body.get("data"))
    data = data if isinstance(data, dict) else {}
    rows = data.get("rows_used")
    if rows is None and isinstance(body.get("predictions"), list):
        rows = len(body["predictions"])
    search = to_jsonable(body.get("search"))
    search = search if isinstance(search, dict) else {}
    candidates = search.get("candidates_scored")
    if candidates is None and isinstance(body.get("groups"), dict):
        candidates = 0
        for g in body["groups"].values():
            part = to_jsonable(
                g.get("search") if isinstance(g, dict) else getattr(g, "search", None)
            )
            candidates += int((part or {}).get("candidates_scored") or 0)
    note(rows=rows, candidates=candidates)


async def _send_problem(
    send,
    status: int,
    kind: str,
    title: str,
    detail: str,
    rid: str,
    path: str,
    headers: list | None = None,
) -> None:
    body = problem_bytes(status, kind, title, detail, rid, instance=path)
    hdrs = [(b"content-type", PROBLEM.encode()), (b"content-length", str(len(body)).encode())]
    await send({"type": "http.response.start", "status": status, "headers": hdrs + (headers or [])})
    await send({"type": "http.response.body", "body": body})


class BodyProblem(StarletteHTTPException):
    """Raised while the body streams in; an HTTPException so the framework maps it."""

    kind, title = "http", "HTTP error"


class BodyTooLarge(BodyProblem):
    kind, title = "too-large", "Request body too large"

    def __init__(self, limit: int):
        super().__init__(
            413, f"the body exceeds the limit of {limit} bytes (setting BESTSCALE_MAX_BODY_BYTES)"
        )


class BodyTooSlow(BodyProblem):
    kind, title = "body-timeout", "Request body too slow"

    def __init__(self, seconds: float):
        super().__init__(
            408,
            f"the body did not arrive whole within {seconds:g} s "
            "(setting BESTSCALE_BODY_TIMEOUT_S)",
        )


class ServiceMiddleware:
    """Outermost layer: request id, access log, metrics, and the guard against the unexpected.

    ``route_paths`` returns the application's route templates; it names the metric label of
    requests refused before routing (a path that is no route is labelled ``unmatched``, so
    callers cannot create label values).
    """

    def __init__(self, app, route_paths: Callable[[], Iterable[str]] | None = None):
        self.app = app
        self._route_paths = route_paths
        self._known: frozenset[str] | None = None

    async def __call__(self, scope, receive, send):
        if scope["type"] != "http":
            return await self.app(scope, receive, send)
        rid = ""
        for k, v in scope["headers"]:
            if k.lower() == b"x-request-id":
                rid = v.decode("latin-1")
                break
        if not _ID_OK.match(rid):
            rid = uuid.uuid4().hex
        scope.setdefault("state", {})["request_id"] = rid
        record: dict = {}
        tok_id, tok_rec = REQUEST_ID.set(rid), _RECORD.set(record)
        t0 = time.perf_counter()
        state = {"status": 500, "started": False}
        rid_header = rid.encode()

        async def send_wrapped(message):
            if message["type"] == "http.response.start":
                state["status"], state["started"] = message["status"], True
                hdrs = [
                    (k, v)
                    for k, v in message.get("headers", [])
                    if k.lower() not in (b"server", b"x-request-id")
                ]
                hdrs.append((b"x-request-id", rid_header))
                hdrs = _security_headers(scope.get("path", ""), hdrs)
                message = {**message, "headers": hdrs}
            await send(message)

        IN_FLIGHT.inc()
        try:
            await self.app(scope, receive, send_wrapped)
        except BodyProblem as exc:  # read outside a route (the route maps it itself)
            if state["started"]:
                raise
            await _send_problem(
                send_wrapped,
                exc.status_code,
                exc.kind,
                exc.title,
                str(exc.detail),
                rid,
                scope.get("path", ""),
            )
        except Exception as exc:
            errlog.error(
                "unhandled error",
                exc_info=exc,
                extra={"fields": {"method": scope.get("method"), "route": self._label(scope)}},
            )
            ERRORS.labels(self._label(scope)).inc()
            if state["started"]:
                raise  # too late for a status: let the server drop the connection
            body = internal_error_bytes(rid, scope.get("path", ""))
            await send_wrapped(
                {
                    "type": "http.response.start",
                    "status": 500,
                    "headers": [
                        (b"content-type", PROBLEM.encode()),
                        (b"content-length", str(len(body)).encode()),
                    ],
                }
            )
            await send_wrapped({"type": "http.response.body", "body": body})
        finally:
            IN_FLIGHT.dec()
            dt = time.perf_counter() - t0
            route, status = self._label(scope), str(state["status"])
            REQUESTS.labels(route, status).inc()
            LATENCY.labels(route, status).observe(dt)
            if isinstance(record.get("rows"), int):
                ROWS.labels(route).inc(record["rows"])
            if isinstance(record.get("candidates"), int):
                CANDIDATES.inc(record["candidates"])
            log.info(
                "request",
                extra={
                    "fields": {
                        "request_id": rid,
                        "method": scope.get("method"),
                        "route": route,
                        "status": state["status"],
                        "duration_s": round(dt, 4),
                        **record,
                    }
                },
            )
            _RECORD.reset(tok_rec)
            REQUEST_ID.reset(tok_id)

    def _label(self, scope) -> str:
        path = getattr(scope.get("route"), "path", None)
        if path:
            return path
        if self._known is None and self._route_paths is not None:
            self._known = frozenset(self._route_paths())
        p = scope.get("path", "")
        return p if self._known and p in self._known else "unmatched"


#: paths the token protects and back-pressure refuses early (the API's resources)
PROTECTED_PREFIX = "/v1/"


class GuardMiddleware:
    """Token, body size and early back-pressure, before any body byte is read."""

    def __init__(
        self,
        app,
        max_body_bytes: int,
        api_token: str | None = None,
        body_timeout_s: float = 60.0,
        metrics_public: bool = False,
        docs_public: bool | None = None,
    ):
        self.app = app
        # with a token: /metrics and the documentation need it unless made public
        self.open_paths: tuple[str, ...] = ()
        if api_token:
            if metrics_public:
                self.open_paths += ("/metrics",)
            if docs_public:
                self.open_paths += DOC_PATHS
        self.max_body = max_body_bytes
        self.body_timeout = body_timeout_s
        self.token = api_token.encode() if api_token else None

    async def __call__(self, scope, receive, send):
        if scope["type"] != "http":
            return await self.app(scope, receive, send)
        path = scope.get("path", "")
        rid = scope.get("state", {}).get("request_id", "")
        raw_headers = [k.lower() for k, _ in scope["headers"]]
        if (b"transfer-encoding" in raw_headers and b"content-length" in raw_headers) or (
            raw_headers.count(b"content-length") > 1
        ):
            return await _send_problem(
                send,
                400,
                "malformed-request",
                "Ambiguous message length",
                "the request carries both Content-Length and Transfer-Encoding (or two "
                "Content-Length headers); send exactly one of them",
                rid,
                path,
            )
        headers = {k.lower(): v for k, v in scope["headers"]}
        if self.token is not None and self._protected(path):
            auth = headers.get(b"authorization", b"")
            given = auth[7:].strip() if auth[:7].lower() == b"bearer " else b""
            if not hmac.compare_digest(given, self.token):
                return await _send_problem(
                    send,
                    401,
                    "unauthorized",
                    "Unauthorized",
                    "this endpoint needs the header 'Authorization: Bearer <token>' with the "
                    "service's API token",
                    rid,
                    path,
                    [(b"www-authenticate", b'Bearer realm="bestscale"')],
                )
        length = headers.get(b"content-length")
        if length is not None and length.strip().isdigit() and int(length) > self.max_body:
            return await _send_problem(
                send,
                413,
                "too-large",
                "Request body too large",
                f"the body has {int(length)} bytes; the limit is "
                f"{self.max_body} (setting BESTSCALE_MAX_BODY_BYTES)",
                rid,
                path,
            )
        if scope.get("method") == "POST" and path.startswith(PROTECTED_PREFIX) and pool.saturated():
            exc = pool.busy_problem(pool.capacity())
            return await _send_problem(
                send,
                503,
                exc.kind,
                exc.title,
                exc.detail,
                rid,
                path,
                [(k.lower().encode(), v.encode()) for k, v in exc.headers.items()],
            )
        seen = 0
        limit, timeout = self.max_body, self.body_timeout
        deadline = time.monotonic() + timeout
        complete = False

        async def receive_counted():
            # Until the body is whole, each wait is bounded by the request's body deadline
            # (a slow or stalled uploader gets 408 and frees the connection); afterwards
            # receive() only waits for the disconnect and is left alone.
            nonlocal seen, complete
            if complete:
                return await receive()
            remaining = deadline - time.monotonic()
            if remaining <= 0:
                raise BodyTooSlow(timeout)
            try:
                with anyio.fail_after(remaining):
                    message = await receive()
            except TimeoutError:
                raise BodyTooSlow(timeout) from None
            if message["type"] == "http.request":
                seen += len(message.get("body", b""))
                if seen > limit:
                    raise BodyTooLarge(limit)
                complete = not message.get("more_body", False)
            else:
                complete = True
            return message

        await self.app(scope, receive_counted, send)

    def _protected(self, path: str) -> bool:
        if path.startswith(PROTECTED_PREFIX):
            return True
        if path in self.open_paths or (path.startswith("/docs/") and "/docs" in self.open_paths):
            return False
        return path == "/metrics" or path in DOC_PATHS or path.startswith("/docs/")


class ProblemCORSMiddleware(CORSMiddleware):
    """CORS for the configured origins; a refused preflight is a 400 problem+json naming
    what was refused (origin, method or headers) instead of a plain-text line."""

    def preflight_response(self, request_headers) -> Response:
        response = super().preflight_response(request_headers)
        if response.status_code != 400:
            return response
        refused = bytes(response.body).decode("utf-8", "replace").removeprefix("Disallowed CORS ")
        asked = {
            "origin": request_headers.get("origin"),
            "method": request_headers.get("access-control-request-method"),
            "headers": request_headers.get("access-control-request-headers"),
        }
        parts = [p.strip() for p in refused.split(",") if p.strip()]
        detail = (
            "cross-origin request refused: "
            + "; ".join(
                f"{p} {asked[p]!r} is not allowed" if asked.get(p) else f"{p} is not allowed"
                for p in parts
            )
            + " (allowed origins are set by BESTSCALE_CORS_ORIGINS)"
        )
        errors = [{"pointer": "", "detail": f"{p} not allowed"} for p in parts]
        headers = {
            k: v
            for k, v in response.headers.items()
            if k.lower() not in ("content-type", "content-length")
        }
        return Response(
            problem_bytes(
                400,
                "cors-refused",
                "Cross-origin request refused",
                detail,
                REQUEST_ID.get(None),
                errors=errors,
            ),
            status_code=400,
            headers=headers,
            media_type=PROBLEM,
        )
