"""The HTTP side of a selection (service/api/selection.py): the disconnect probe a route
hands to the search.

Reference: Starlette's ``Request.is_disconnected`` (ASGI ``http.disconnect`` message), read
through a real route of a FastAPI app and, outside one, from a plain thread.
"""

from __future__ import annotations

from fastapi import FastAPI, Request
from fastapi.testclient import TestClient
from service.api.selection import disconnect_probe


def test_a_connected_caller_is_not_gone_and_outside_a_route_the_probe_says_no():
    app = FastAPI()
    seen: list[bool] = []

    @app.post("/probe")
    def probe(request: Request):  # a def route: runs in a worker thread, as the routes do
        gone = disconnect_probe(request)
        seen.append(gone())
        return {"gone": seen[-1]}

    with TestClient(app) as c:
        assert c.post("/probe").json() == {"gone": False}

    async def receive():
        return {"type": "http.disconnect"}

    scope = {"type": "http", "method": "POST", "path": "/", "headers": [], "query_string": b""}
    # not in a worker thread of an event loop: the probe answers False rather than raising
    assert disconnect_probe(Request(scope, receive))() is False
    assert seen == [False]


def test_a_caller_that_hung_up_is_gone():
    app = FastAPI()
    seen: list[bool] = []

    @app.post("/probe")
    def probe(request: Request):
        seen.append(disconnect_probe(request)())
        return {}

    import anyio

    async def run() -> None:
        async def receive():  # the caller has gone before the route looks
            return {"type": "http.disconnect"}

        async def send(message):
            return None

        scope = {
            "type": "http",
            "asgi": {"version": "3.0"},
            "http_version": "1.1",
            "method": "POST",
            "scheme": "http",
            "path": "/probe",
            "raw_path": b"/probe",
            "query_string": b"",
            "headers": [],
            "client": ("127.0.0.1", 1),
            "server": ("127.0.0.1", 80),
        }
        await app(scope, receive, send)

    anyio.run(run)
    # source: the ASGI spec: an http.disconnect message means the client has gone
    assert seen == [True]
