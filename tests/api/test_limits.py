"""Limits, back-pressure, security headers and the outer error guard, over HTTP (in-process).

The body limit is checked at the ASGI level, where the test controls the byte stream and can
count what the service pulled: a declared Content-Length over the limit is refused before any
byte is read; a streamed body is refused as soon as the running count passes the limit.
"""

from __future__ import annotations

import asyncio
import json
import logging
import threading
import time

import numpy as np
import pytest
from fastapi.testclient import TestClient
from service.api import pool
from service.selection.search import LISTING_SHARE
from service.settings import get_settings

SEL = "/v1/selections"
TOKEN = "limits-token-0123456789"


@pytest.fixture
def make_app(monkeypatch):
    """An app built with the given BESTSCALE_* settings (restored afterwards)."""

    def build(**env):
        for k, v in env.items():
            monkeypatch.setenv(f"BESTSCALE_{k.upper()}", str(v))
        get_settings.cache_clear()
        from service.app import create_app

        return create_app()

    yield build
    monkeypatch.undo()
    get_settings.cache_clear()


def _table(n: int = 40, k: int = 1, seed: int = 5) -> dict:
    rng = np.random.default_rng(seed)
    cols = {f"x{j}": rng.uniform(1, 50, n).round(3).tolist() for j in range(k)}
    eta = 2 + sum(0.4 * np.log(np.array(v)) for v in cols.values())
    cols["cost"] = np.exp(eta + rng.normal(0, 0.2, n)).round(3).tolist()
    return cols


def _sel(k: int = 1, n: int = 40, **over) -> dict:
    body = {
        "data": {"columns": _table(n, k)},
        "response": "cost",
        "predictors": [f"x{j}" for j in range(k)],
        "validation": {"folds": 3},
        "top": 1,
        "transforms": {"response": ["identity", "log"], "predictors": ["identity", "log"]},
    }
    body.update(over)
    return body


def _slow_search(time_limit_s: float) -> dict:
    """An exhaustive search that needs far longer than ``time_limit_s`` (about 30 s in all:
    375 candidates, each with a Box-Cox or Yeo-Johnson lambda re-estimated in 50 folds)."""
    return _sel(
        k=3,
        n=300,
        transforms={
            "response": ["box_cox", "yeo_johnson"],
            "predictors": ["identity", "log", "sqrt", "reciprocal", "square"],
        },
        validation={"folds": 10, "repeats": 5},
        limits={"time_limit_s": time_limit_s},
    )


def _problem(r, status: int) -> dict:
    assert r.status_code == status, (r.status_code, r.text[:300])
    assert r.headers["content-type"].startswith("application/problem+json")
    body = r.json()
    assert body["status"] == status and body["detail"] and isinstance(body["errors"], list)
    return body


# ---------------------------------------------------------------- body size, at the ASGI level


def _asgi(
    app, path: str, headers: list[tuple[bytes, bytes]], chunks: list[bytes], method: str = "POST"
):
    """Call the ASGI app; returns (status, headers, body, number of receive() calls)."""
    pulled = 0
    sent: list[dict] = []

    async def receive():
        nonlocal pulled
        if pulled < len(chunks):
            pulled += 1
            return {
                "type": "http.request",
                "body": chunks[pulled - 1],
                "more_body": pulled < len(chunks),
            }
        await asyncio.sleep(0)
        return {"type": "http.disconnect"}

    async def send(message):
        sent.append(message)

    scope = {
        "type": "http",
        "asgi": {"version": "3.0"},
        "http_version": "1.1",
        "method": method,
        "scheme": "http",
        "path": path,
        "raw_path": path.encode(),
        "query_string": b"",
        "root_path": "",
        "headers": headers,
        "client": ("127.0.0.1", 50000),
        "server": ("127.0.0.1", 8000),
        "state": {},
    }
    asyncio.run(app(scope, receive, send))
    start = next(m for m in sent if m["type"] == "http.response.start")
    body = b"".join(m.get("body", b"") for m in sent if m["type"] == "http.response.body")
    return start["status"], dict(start["headers"]), body, pulled


def test_declared_length_over_the_limit_is_refused_before_reading(make_app):
    app = make_app(max_body_bytes=4096)
    chunks = [b"x" * 1024] * 8
    status, headers, body, pulled = _asgi(
        app, SEL, [(b"content-type", b"application/json"), (b"content-length", b"8192")], chunks
    )
    # source: RFC 9110 section 15.5.14 (413 Content Too Large)
    assert status == 413 and pulled == 0  # not one byte was read
    assert headers[b"content-type"].startswith(b"application/problem+json")
    assert "BESTSCALE_MAX_BODY_BYTES" in json.loads(body)["detail"]


def test_streamed_body_is_counted_and_cut_off_at_the_limit(make_app):
    app = make_app(max_body_bytes=4096)
    chunks = [b" " * 1024] * 1000  # 1 MB announced by nobody (chunked transfer)
    status, _headers, body, pulled = _asgi(
        app, SEL, [(b"content-type", b"application/json")], chunks
    )
    assert status == 413
    assert pulled <= 5  # 4096 bytes = 4 chunks; the 5th passes the limit and stops the read
    assert json.loads(body)["type"].endswith(":too-large")


def test_body_under_the_limit_is_read_whole(make_app):
    app = make_app(max_body_bytes=4096)
    text = json.dumps({"response": "cost"}).encode()
    status, _, _, pulled = _asgi(
        app, SEL, [(b"content-type", b"application/json")], [text[:5], text[5:]]
    )
    assert status == 422 and pulled == 2  # read, parsed, refused for its content


def test_oversized_body_over_http_is_a_413_problem(make_app):
    app = make_app(max_body_bytes=2048)
    with TestClient(app) as c:
        r = c.post(
            SEL, content=b"[" + b"1," * 4000 + b"1]", headers={"Content-Type": "application/json"}
        )
    _problem(r, 413)


# ---------------------------------------------------------------- saturation


def test_saturated_pool_answers_503_with_retry_after_before_reading(make_app):
    app = make_app(pool_size=1)
    with pool.compute_slot():  # every slot of this process is now taken
        status, headers, body, pulled = _asgi(
            app, SEL, [(b"content-type", b"application/json")], [json.dumps(_sel()).encode()]
        )
        # source: RFC 9110 sections 15.6.4 (503) and 10.2.3 (Retry-After in delay-seconds)
        assert status == 503 and pulled == 0
        assert int(headers[b"retry-after"]) > 0
        assert json.loads(body)["type"].endswith(":busy")
        with TestClient(app) as c:
            assert c.get("/healthz").status_code == 200
            assert c.get("/v1/transforms").status_code == 200  # reads need no slot
    assert pool.busy() == 0


def test_health_answers_while_a_search_holds_the_only_slot(make_app):
    app = make_app(pool_size=1)
    body = _slow_search(3)
    out = {}
    with TestClient(app) as c:
        worker = threading.Thread(target=lambda: out.update(r=c.post(SEL, json=body)))
        worker.start()
        deadline = time.monotonic() + 30
        while pool.busy() == 0 and worker.is_alive() and time.monotonic() < deadline:
            time.sleep(0.01)
        assert pool.busy() == 1, "the search never took its slot"
        health = c.get("/healthz")
        second = c.post(SEL, json=_sel())
        still_running = worker.is_alive()
        worker.join(60)
    assert health.status_code == 200 and still_running  # answered while the search ran
    busy = _problem(second, 503)
    assert busy["type"].endswith(":busy") and int(second.headers["Retry-After"]) > 0
    assert out["r"].status_code == 200
    assert pool.busy() == 0  # the slot was given back


# ---------------------------------------------------------------- time limit


def test_time_limit_returns_the_best_so_far_and_frees_the_slot(make_app):
    app = make_app()
    with TestClient(app) as c:
        r = c.post(SEL, json=_slow_search(0.5))
    assert r.status_code == 200, r.text[:300]
    got = r.json()
    assert got["search"]["complete"] is False
    # it ran to the limit, less at most the share kept for the listed entries, then stopped
    assert 0.5 * (1 - LISTING_SHARE) <= got["search"]["elapsed_s"] < 20
    assert got["search"]["strategy"]["stopped_by"] == "time_limit_s"
    assert got["search"]["candidates_scored"] < got["search"]["candidates_considered"]
    assert got["ranking"] and any("stop" in w.lower() for w in got["warnings"])  # and says so
    assert pool.busy() == 0


def test_one_deadline_bounds_the_work_after_the_search_too(make_app):
    """The search stops at the time limit; the parts after it (CV+ fits of the entries,
    stability resamples, the report's figures) ask the same deadline instead of each taking
    a time limit of its own, and say what they left out."""
    body = {**_slow_search(1.0), "top": 3, "trust": {"stability": True, "resamples": 50}}
    with TestClient(make_app()) as c:
        t0 = time.monotonic()
        r = c.post(SEL, json=body)
        took = time.monotonic() - t0
        page = c.post("/v1/reports", json=body)
    assert r.status_code == 200, r.text[:300]
    got = r.json()
    assert got["search"]["complete"] is False
    assert got["trust"]["resamples"] == 0  # none started after the deadline
    assert not got["trust"]["stability_details"]["complete"]
    kept = [e["model"]["cv_plus"] for e in got["ranking"]]
    assert all(not b["available"] and "time limit of 1 s ran out" in b["reason"] for b in kept)
    assert took < 30  # generous (a loaded machine): one candidate past the limit, no second one
    assert page.status_code == 200
    assert page.text.count("ran out before this figure was drawn") == 2  # ranks 2 and 3


def test_time_limit_before_any_candidate_is_503_with_retry_after(make_app):
    app = make_app()
    with TestClient(app) as c:
        r = c.post(SEL, json=_sel(limits={"time_limit_s": 1e-9}))
    assert _problem(r, 503)["type"].endswith(":over-budget")
    assert int(r.headers["Retry-After"]) > 0
    assert pool.busy() == 0


@pytest.mark.parametrize(
    "env,over,pointer,named",
    [
        ({"max_rows": 20}, {}, "/data", "BESTSCALE_MAX_ROWS"),
        ({"max_columns": 2}, {"predictors": ["x0", "x1"]}, "/predictors", "BESTSCALE_MAX_COLUMNS"),
        (
            {"max_candidates": 10, "default_max_candidates": 5},
            {"limits": {"max_candidates": 11}},
            "/limits/max_candidates",
            "10",
        ),
        (
            {"max_time_limit_s": 5, "default_time_limit_s": 5},
            {"limits": {"time_limit_s": 6}},
            "/limits/time_limit_s",
            "5",
        ),
    ],
)
def test_size_limits_are_422_naming_the_limit(make_app, env, over, pointer, named):
    app = make_app(**env)
    body = _sel(k=2) if "predictors" in over else _sel()
    body.update(over)
    with TestClient(app) as c:
        p = _problem(c.post(SEL, json=body), 422)
    assert pointer in [e["pointer"] for e in p["errors"]] and named in p["detail"]


def test_group_limit_is_422_naming_the_limit(make_app):
    app = make_app(max_groups=2)
    body = _sel()
    body["data"]["columns"]["region"] = ["north", "south", "east", "west"] * 10
    body["group_by"] = "region"
    with TestClient(app) as c:
        p = _problem(c.post(SEL, json=body), 422)
    assert (
        "/group_by" in [e["pointer"] for e in p["errors"]] and "BESTSCALE_MAX_GROUPS" in p["detail"]
    )


# ---------------------------------------------------------------- token


def test_token_required_on_v1_when_configured(make_app):
    app = make_app(api_token=TOKEN)
    with TestClient(app) as c:
        missing = c.get("/v1/transforms")
        wrong = c.get("/v1/transforms", headers={"Authorization": "Bearer " + TOKEN[:-1] + "x"})
        scheme = c.get("/v1/transforms", headers={"Authorization": "Basic " + TOKEN})
        right = c.get("/v1/transforms", headers={"Authorization": "Bearer " + TOKEN})
        post = c.post(SEL, json=_sel())
        health = c.get("/healthz")
        metrics, docs = c.get("/metrics"), c.get("/openapi.json")
        auth = {"Authorization": "Bearer " + TOKEN}
        metrics_ok, docs_ok = c.get("/metrics", headers=auth), c.get("/openapi.json", headers=auth)
    for r in (missing, wrong, scheme, post, metrics, docs):
        # source: RFC 6750 section 3 (401 with a WWW-Authenticate: Bearer challenge)
        assert _problem(r, 401)["type"].endswith(":unauthorized")
        assert r.headers["WWW-Authenticate"].startswith("Bearer")
    assert right.status_code == 200
    assert health.status_code == 200  # liveness stays open for the orchestrator
    assert metrics_ok.status_code == 200 and docs_ok.status_code == 200


def test_metrics_and_docs_can_be_made_public_with_a_token(make_app):
    app = make_app(api_token=TOKEN, metrics_public="true", docs_public="true")
    with TestClient(app) as c:
        assert c.get("/metrics").status_code == 200
        assert c.get("/openapi.json").status_code == 200
        assert c.get("/v1/transforms").status_code == 401


def test_no_token_configured_means_open_api(make_app):
    app = make_app()
    with TestClient(app) as c:
        assert c.get("/v1/transforms").status_code == 200


def test_openapi_document_declares_the_bearer_scheme_when_configured(make_app):
    app = make_app(api_token=TOKEN)
    doc = app.openapi()
    assert doc["components"]["securitySchemes"]["bearer"]["scheme"] == "bearer"
    assert doc["paths"]["/v1/selections"]["post"]["security"] == [{"bearer": []}]
    assert "401" in doc["paths"]["/v1/selections"]["post"]["responses"]
    assert "security" not in doc["paths"]["/healthz"]["get"]


def test_a_stalled_upload_gets_408_and_frees_the_connection(make_app):
    app = make_app(body_timeout_s=0.3)
    sent: list[dict] = []
    calls = 0

    async def receive():  # one chunk, then the client goes quiet for good
        nonlocal calls
        calls += 1
        if calls == 1:
            return {"type": "http.request", "body": b'{"response": ', "more_body": True}
        await asyncio.sleep(3600)

    async def send(message):
        sent.append(message)

    scope = {
        "type": "http",
        "asgi": {"version": "3.0"},
        "http_version": "1.1",
        "method": "POST",
        "scheme": "http",
        "path": SEL,
        "raw_path": SEL.encode(),
        "query_string": b"",
        "root_path": "",
        "client": ("127.0.0.1", 50000),
        "server": ("127.0.0.1", 8000),
        "state": {},
        "headers": [(b"content-type", b"application/json")],
    }

    async def run():
        await asyncio.wait_for(app(scope, receive, send), timeout=10)

    asyncio.run(run())
    start = next(m for m in sent if m["type"] == "http.response.start")
    body = json.loads(
        b"".join(m.get("body", b"") for m in sent if m["type"] == "http.response.body")
    )
    # source: RFC 9110 section 15.5.9 (408 Request Timeout)
    assert start["status"] == 408
    assert body["type"].endswith(":body-timeout") and "BESTSCALE_BODY_TIMEOUT_S" in body["detail"]


def test_a_body_that_arrives_in_time_is_unaffected_by_the_timeout(make_app):
    app = make_app(body_timeout_s=5)
    with TestClient(app) as c:
        r = c.post(SEL, json=_sel())
    assert r.status_code == 200, r.text[:300]


# ---------------------------------------------------------------- CORS


def _preflight(c, origin: str):
    return c.options(
        SEL,
        headers={
            "Origin": origin,
            "Access-Control-Request-Method": "POST",
            "Access-Control-Request-Headers": "authorization,content-type",
        },
    )


def test_cors_only_for_configured_origins(make_app):
    app = make_app(cors_origins='["https://ops.example"]', api_token=TOKEN)
    with TestClient(app) as c:
        ok = _preflight(c, "https://ops.example")
        bad = _preflight(c, "https://evil.example")
        simple_ok = c.get("/healthz", headers={"Origin": "https://ops.example"})
        simple_bad = c.get("/healthz", headers={"Origin": "https://evil.example"})
        refused = c.get("/v1/transforms", headers={"Origin": "https://ops.example"})
    # source: Fetch standard, CORS protocol (preflight, Access-Control-Allow-Origin echo)
    assert ok.status_code == 200  # the preflight needs no token
    assert ok.headers["access-control-allow-origin"] == "https://ops.example"
    assert "authorization" in ok.headers["access-control-allow-headers"].lower()
    assert "access-control-allow-origin" not in bad.headers
    assert simple_ok.headers["access-control-allow-origin"] == "https://ops.example"
    assert "x-request-id" in simple_ok.headers["access-control-expose-headers"].lower()
    assert "access-control-allow-origin" not in simple_bad.headers
    # a 401 carries CORS headers, so the browser lets the page read the problem
    assert refused.status_code == 401
    assert refused.headers["access-control-allow-origin"] == "https://ops.example"


def test_refused_preflight_is_a_problem_naming_what_was_refused(make_app):
    app = make_app(cors_origins='["https://ops.example"]')
    with TestClient(app) as c:
        bad = _preflight(c, "https://evil.example")
        bad_method = c.options(
            SEL,
            headers={"Origin": "https://ops.example", "Access-Control-Request-Method": "DELETE"},
        )
    body = _problem(bad, 400)
    assert body["type"].endswith(":cors-refused") and "https://evil.example" in body["detail"]
    assert "BESTSCALE_CORS_ORIGINS" in body["detail"]
    assert bad.headers.get("x-request-id")
    assert "'DELETE'" in _problem(bad_method, 400)["detail"]


def test_no_cors_headers_without_configured_origins(make_app):
    app = make_app()
    with TestClient(app) as c:
        r = c.get("/healthz", headers={"Origin": "https://ops.example"})
        pre = _preflight(c, "https://ops.example")
    assert "access-control-allow-origin" not in r.headers
    assert "access-control-allow-origin" not in pre.headers


# ---------------------------------------------------------------- headers and request ids


def test_no_server_header_and_request_id_echoed(make_app):
    app = make_app()
    with TestClient(app) as c:
        given = c.get("/healthz", headers={"X-Request-ID": "job-42.run:7"})
        made = c.get("/healthz")
        hostile = c.get("/healthz", headers={"X-Request-ID": "bad id\twith spaces" + "x" * 300})
    for r in (given, made, hostile):
        # source: RFC 9110 section 10.2.4 (Server is optional; it may reveal software versions)
        assert "server" not in {k.lower() for k in r.headers}
    assert given.headers["x-request-id"] == "job-42.run:7"
    assert len(made.headers["x-request-id"]) == 32
    assert hostile.headers["x-request-id"] != "bad id\twith spaces" + "x" * 300


def test_server_is_started_without_its_version_header(monkeypatch):
    import uvicorn
    from service import __main__ as entry

    seen = {}
    monkeypatch.setattr(uvicorn, "run", lambda *a, **kw: seen.update(kw))
    get_settings.cache_clear()
    try:
        assert entry.main(["--port", "8123", "--workers", "1"]) == 0
    finally:
        get_settings.cache_clear()
    assert seen["server_header"] is False and seen["access_log"] is False
    assert seen["port"] == 8123 and seen["log_config"]["loggers"]["bestscale"]


# ---------------------------------------------------------------- unexpected errors


def test_unexpected_error_in_a_def_route_is_a_bare_500_with_the_request_id(make_app, caplog):
    app = make_app()

    def explode():
        raise RuntimeError("secret internals /etc/passwd")

    async def explode_async():
        raise KeyError("another secret")

    app.add_api_route("/v1/test-explode", explode, methods=["GET"])
    app.add_api_route("/v1/test-explode-async", explode_async, methods=["GET"])
    with (
        caplog.at_level(logging.ERROR, logger="bestscale"),
        TestClient(app, raise_server_exceptions=False) as c,
    ):
        rs = [
            c.get("/v1/test-explode", headers={"X-Request-ID": "boom-1"}),
            c.get("/v1/test-explode-async", headers={"X-Request-ID": "boom-2"}),
        ]
    for r, rid in zip(rs, ["boom-1", "boom-2"], strict=True):
        body = _problem(r, 500)
        assert body["request_id"] == rid == r.headers["x-request-id"]
        assert "secret" not in r.text and "Traceback" not in r.text
        assert set(body) <= {
            "type",
            "title",
            "status",
            "detail",
            "errors",
            "request_id",
            "instance",
        }
    records = [rec for rec in caplog.records if rec.name == "bestscale.error"]
    assert len(records) == 2 and all(rec.exc_info for rec in records)
    assert "secret internals" in str(records[0].exc_info[1])


# ---------------------------------------------------------------- access log and metrics


def test_one_access_line_per_request_with_id_route_status_duration(make_app, caplog):
    app = make_app()
    with caplog.at_level(logging.INFO, logger="bestscale.access"), TestClient(app) as c:
        c.get("/healthz", headers={"X-Request-ID": "line-1"})
        c.post(
            SEL,
            content=b"{",
            headers={"Content-Type": "application/json", "X-Request-ID": "line-2"},
        )
    from service.api.logs import JsonFormatter

    fmt = JsonFormatter()
    lines = [
        json.loads(fmt.format(rec)) for rec in caplog.records if rec.name == "bestscale.access"
    ]
    by_id = {ln["request_id"]: ln for ln in lines}
    assert by_id["line-1"]["route"] == "/healthz" and by_id["line-1"]["status"] == 200
    assert by_id["line-2"]["route"] == SEL and by_id["line-2"]["status"] == 400
    assert all(ln["duration_s"] >= 0 and ln["method"] in ("GET", "POST") for ln in lines)


def _metric(text: str, name: str, **labels) -> float:
    want = ",".join(f'{k}="{v}"' for k, v in sorted(labels.items()))
    for line in text.splitlines():
        if line.startswith("#"):
            continue
        key, _, value = line.rpartition(" ")
        lname, _, rest = key.partition("{")
        got = ",".join(sorted(rest.rstrip("}").split(","))) if rest else ""
        if lname == name and got == want:
            return float(value)
    return 0.0


def test_metrics_count_requests_rejections_and_the_pool(make_app):
    app = make_app(max_body_bytes=2048)
    with TestClient(app) as c:
        before = c.get("/metrics").text
        c.get("/healthz")
        c.post(SEL, content=b"x" * 5000, headers={"Content-Type": "application/json"})
        c.get("/no-such-path-123")
        after = c.get("/metrics")
    assert after.headers["content-type"].startswith("text/plain")
    text = after.text
    for name, labels in [
        ("bestscale_requests_total", {"route": "/healthz", "status": "200"}),
        ("bestscale_requests_total", {"route": SEL, "status": "413"}),
        ("bestscale_requests_total", {"route": "unmatched", "status": "404"}),
        ("bestscale_rejected_total", {"reason": "too-large"}),
        ("bestscale_request_seconds_count", {"route": "/healthz", "status": "200"}),
    ]:
        assert _metric(text, name, **labels) - _metric(before, name, **labels) == 1, (name, labels)
    assert _metric(text, "bestscale_pool_capacity") >= 1
    assert "/no-such-path-123" not in text  # unknown paths do not become label values


def test_real_routes_log_their_rows_and_candidates(make_app, caplog):
    app = make_app()
    with caplog.at_level(logging.INFO, logger="bestscale.access"), TestClient(app) as c:
        before = c.get("/metrics").text
        sel = c.post(SEL, json=_sel(n=40), headers={"X-Request-ID": "real-sel"}).json()
        model = sel["ranking"][0]["model"]
        c.post(
            "/v1/predictions",
            json={"model": model, "data": {"columns": {"x0": [2.0, 3.0, 4.0]}}},
            headers={"X-Request-ID": "real-pred"},
        )
        c.post(
            "/v1/diagnostics",
            json={
                "data": {"columns": _table(40)},
                "specification": sel["ranking"][0]["specification"],
            },
            headers={"X-Request-ID": "real-diag"},
        )
        after = c.get("/metrics").text
    lines = {
        rec.fields["request_id"]: rec.fields
        for rec in caplog.records
        if rec.name == "bestscale.access"
    }
    assert lines["real-sel"]["rows"] == 40
    assert lines["real-sel"]["candidates"] == sel["search"]["candidates_scored"] == 4
    assert lines["real-pred"]["rows"] == 3
    assert lines["real-diag"]["rows"] == 40
    assert (
        _metric(after, "bestscale_candidates_scored_total")
        - _metric(before, "bestscale_candidates_scored_total")
        == 4
    )
    assert (
        _metric(after, "bestscale_rows_total", route=SEL)
        - _metric(before, "bestscale_rows_total", route=SEL)
        == 40
    )


def test_rows_and_candidates_reach_the_access_line_and_the_metrics(make_app, caplog):
    from service.api.middleware import note_result

    app = make_app()

    def computed():  # a def route, like the real ones: it runs in a worker thread
        note_result({"data": {"rows_used": 7}, "search": {"candidates_scored": 3}})
        return {"ok": True}

    def grouped():
        note_result(
            {
                "data": {"rows_used": 9},
                "search": {"groups": 2},
                "groups": {
                    "a": {"search": {"candidates_scored": 4}},
                    "b": {"problem": {"status": 422}},
                },
            }
        )
        return {"ok": True}

    app.add_api_route("/v1/test-computed", computed, methods=["GET"])
    app.add_api_route("/v1/test-grouped", grouped, methods=["GET"])
    with caplog.at_level(logging.INFO, logger="bestscale.access"), TestClient(app) as c:
        before = c.get("/metrics").text
        c.get("/v1/test-computed", headers={"X-Request-ID": "noted-1"})
        c.get("/v1/test-grouped", headers={"X-Request-ID": "noted-2"})
        after = c.get("/metrics").text
    lines = {
        rec.fields["request_id"]: rec.fields
        for rec in caplog.records
        if rec.name == "bestscale.access"
    }
    assert (lines["noted-1"]["rows"], lines["noted-1"]["candidates"]) == (7, 3)
    assert (lines["noted-2"]["rows"], lines["noted-2"]["candidates"]) == (9, 4)
    assert (
        _metric(after, "bestscale_candidates_scored_total")
        - _metric(before, "bestscale_candidates_scored_total")
        == 7
    )
    assert _metric(after, "bestscale_rows_total", route="/v1/test-computed") == 7


def test_large_json_bodies_are_parsed_off_the_event_loop(make_app, monkeypatch):
    from service.api import jsonbody, routing

    seen: list[tuple[int, bool]] = []
    real = jsonbody.parse

    def spy(body):
        try:
            asyncio.get_running_loop()
            on_loop = True
        except RuntimeError:
            on_loop = False
        seen.append((len(body), on_loop))
        return real(body)

    monkeypatch.setattr(jsonbody, "parse", spy)
    default_limit = routing.THREAD_PARSE_BYTES
    app = make_app()
    small = _sel(n=40)
    large = _sel(n=40, units={"cost": "u" * 90}, categorical=[])
    large["data"]["columns"]["pad"] = ["p" * 100] * 40
    with TestClient(app) as c:
        c.post(SEL, json=small)
        monkeypatch.setattr(routing, "THREAD_PARSE_BYTES", 1024)
        c.post(SEL, json=large)
    assert seen[0][1] is True and seen[0][0] < default_limit  # small: inline
    assert seen[1][1] is False and seen[1][0] > 1024  # large: in a worker thread
