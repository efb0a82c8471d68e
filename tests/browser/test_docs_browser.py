"""The /docs page renders the endpoint list in a browser that may reach nothing but the
service itself (every other request is blocked and recorded)."""

from __future__ import annotations

import socket
import threading
import time

import pytest
import uvicorn
from service.app import create_app


@pytest.fixture(scope="module")
def server():
    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        port = sock.getsockname()[1]
    config = uvicorn.Config(create_app(), host="127.0.0.1", port=port, log_level="warning")
    srv = uvicorn.Server(config)
    thread = threading.Thread(target=srv.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + 20
    while not srv.started:
        assert time.monotonic() < deadline, "the test server did not start"
        time.sleep(0.05)
    yield f"http://127.0.0.1:{port}"
    srv.should_exit = True
    thread.join(10)


def test_docs_render_the_endpoints_with_the_network_blocked(browser, server):
    context = browser.new_context()
    blocked: list[str] = []
    fetched: list[str] = []

    def gate(route):
        url = route.request.url
        if url.startswith(server + "/"):
            fetched.append(url)
            route.continue_()
        else:
            blocked.append(url)
            route.abort()

    context.route("**/*", gate)
    page = context.new_page()
    errors: list[str] = []
    page.on("pageerror", lambda e: errors.append(str(e)))
    page.goto(server + "/docs", wait_until="networkidle")
    page.wait_for_selector(".opblock", timeout=15000)
    listed = page.locator(".opblock-summary-path").all_inner_texts()
    context.close()
    assert blocked == []
    assert errors == []
    assert server + "/openapi.json" in fetched
    for path in ("/v1/selections", "/v1/diagnostics", "/v1/predictions", "/v1/reports"):
        assert any(path in text for text in listed), (path, listed)


def test_no_second_docs_page_and_no_framework_icon(server):
    import httpx2 as httpx

    assert httpx.get(server + "/redoc").status_code == 404
    page = httpx.get(server + "/docs").text
    assert "cdn" not in page.lower() and "fastapi.tiangolo" not in page
    assert 'href="data:image/svg+xml,' in page
