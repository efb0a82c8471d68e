"""Pure ASGI middleware: request ids, access logs and metrics, body-size limit, bearer token."""

from __future__ import annotations

import hmac
import json
import logging
import re
import time
import uuid

from prometheus_client import Counter, Histogram
from starlette.exceptions import HTTPException as StarletteHTTPException

log = logging.getLogger("bestscale.access")

REQUESTS = Counter("bestscale_requests_total", "HTTP requests", ["route", "status"])
LATENCY = Histogram("bestscale_request_seconds", "request latency", ["route"],
                    buckets=(0.01, 0.05, 0.1, 0.25, 0.5, 1, 2.5, 5, 10, 30, 60, 120, 300))
REJECTED = Counter("bestscale_rejected_total", "requests rejected before the core ran", ["reason"])

_ID_OK = re.compile(r"^[A-Za-z0-9._:-]{1,128}$")
_PROBLEM = b"application/problem+json"


async def _send_problem(send, status: int, kind: str, title: str, detail: str, rid: str,
                        headers: list | None = None) -> None:
    body = json.dumps({"type": f"urn:bestscale:problem:{kind}", "title": title, "status": status,
                       "detail": detail, "errors": [], "request_id": rid}).encode()
    hdrs = [(b"content-type", _PROBLEM), (b"content-length", str(len(body)).encode()),
            (b"x-request-id", rid.encode())] + (headers or [])
    await send({"type": "http.response.start", "status": status, "headers": hdrs})
    await send({"type": "http.response.body", "body": body})


class BodyTooLarge(StarletteHTTPException):
    """Raised while the body streams in; an HTTPException so the framework passes it on."""

    def __init__(self, limit: int):
        super().__init__(413, f"the body exceeds the limit of {limit} bytes "
                              "(setting BESTSCALE_MAX_BODY_BYTES)")


class ServiceMiddleware:
    """Outermost layer: every response gets an X-Request-ID and one JSON log line."""

    def __init__(self, app, max_body_bytes: int, api_token: str | None = None):
        self.app = app
        self.max_body = max_body_bytes
        self.token = api_token

    async def __call__(self, scope, receive, send):
        if scope["type"] != "http":
            return await self.app(scope, receive, send)
        headers = {k.decode("latin-1").lower(): v.decode("latin-1") for k, v in scope["headers"]}
        rid = headers.get("x-request-id", "")
        if not _ID_OK.match(rid):
            rid = uuid.uuid4().hex
        scope.setdefault("state", {})["request_id"] = rid
        path = scope.get("path", "")
        t0 = time.perf_counter()
        status_box = {"status": 500}

        async def send_wrapped(message):
            if message["type"] == "http.response.start":
                status_box["status"] = message["status"]
                hdrs = [(k, v) for k, v in message.get("headers", []) if k.lower() != b"server"]
                hdrs.append((b"x-request-id", rid.encode()))
                message = {**message, "headers": hdrs}
            await send(message)

        try:
            if self.token and path.startswith("/v1/"):
                auth = headers.get("authorization", "")
                given = auth[7:] if auth[:7].lower() == "bearer " else ""
                if not hmac.compare_digest(given.encode(), self.token.encode()):
                    REJECTED.labels("unauthorized").inc()
                    return await _send_problem(send_wrapped, 401, "unauthorized", "Unauthorized",
                                               "this endpoint needs 'Authorization: Bearer <token>'",
                                               rid, [(b"www-authenticate", b"Bearer")])
            length = headers.get("content-length")
            if length is not None and length.isdigit() and int(length) > self.max_body:
                REJECTED.labels("too_large").inc()
                return await _send_problem(send_wrapped, 413, "too-large", "Request body too large",
                                           f"the body has {int(length)} bytes; the limit is "
                                           f"{self.max_body} (setting BESTSCALE_MAX_BODY_BYTES)", rid)
            seen = {"n": 0}

            async def receive_counted():
                message = await receive()
                if message["type"] == "http.request":
                    seen["n"] += len(message.get("body", b""))
                    if seen["n"] > self.max_body:
                        REJECTED.labels("too_large").inc()
                        raise BodyTooLarge(self.max_body)
                return message

            await self.app(scope, receive_counted, send_wrapped)
        finally:
            route = _route_label(scope)
            dt = time.perf_counter() - t0
            REQUESTS.labels(route, str(status_box["status"])).inc()
            LATENCY.labels(route).observe(dt)
            log.info(json.dumps({"request_id": rid, "method": scope.get("method"), "route": route,
                                 "status": status_box["status"], "duration_s": round(dt, 4),
                                 **scope["state"].get("log_fields", {})}))


def _route_label(scope) -> str:
    route = scope.get("route")
    path = getattr(route, "path", None)
    return path if path else "unmatched"
