"""Connection hygiene of the HTTP server (service/server.py), on a real socket.

References: RFC 9112 (an HTTP/1.1 request head ends with an empty line, CRLF CRLF); the
server library's own h11 protocol underneath; the standard socket module as the client.
"""

from __future__ import annotations

import socket
import threading
import time

import pytest
import uvicorn
from fastapi import FastAPI
from service.server import GuardedH11
from service.settings import get_settings


@pytest.fixture
def server(monkeypatch):
    monkeypatch.setenv("BESTSCALE_HEADER_TIMEOUT_S", "0.5")
    monkeypatch.setenv("BESTSCALE_MAX_CONNECTIONS", "2")
    get_settings.cache_clear()
    app = FastAPI()

    @app.get("/ping")
    def ping():
        return {"ok": True}

    sock = socket.socket()
    sock.bind(("127.0.0.1", 0))
    port = sock.getsockname()[1]
    config = uvicorn.Config(app, http=GuardedH11, log_level="error", lifespan="off")
    srv = uvicorn.Server(config)
    thread = threading.Thread(target=srv.run, kwargs={"sockets": [sock]}, daemon=True)
    thread.start()
    deadline = time.monotonic() + 10
    while not srv.started and time.monotonic() < deadline:
        time.sleep(0.02)
    yield port
    srv.should_exit = True
    thread.join(10)
    sock.close()
    monkeypatch.undo()
    get_settings.cache_clear()


def _closed_within(conn: socket.socket, seconds: float) -> bool:
    conn.settimeout(seconds)
    try:
        return conn.recv(1024) == b""
    except TimeoutError:
        return False
    except ConnectionResetError:
        return True


def test_a_trickling_request_head_is_closed_and_a_complete_one_answered(server):
    slow = socket.create_connection(("127.0.0.1", server))
    slow.sendall(b"GET /ping HTTP/1.1\r\nHost: x\r\n")  # no empty line: the head is incomplete
    start = time.monotonic()
    assert _closed_within(slow, 5.0)
    assert 0.3 < time.monotonic() - start < 4.0  # after about the 0.5 s setting
    slow.close()
    ok = socket.create_connection(("127.0.0.1", server))
    ok.sendall(b"GET /ping HTTP/1.1\r\nHost: x\r\nConnection: close\r\n\r\n")  # RFC 9112 head
    ok.settimeout(5)
    reply = b""
    while chunk := ok.recv(4096):
        reply += chunk
    ok.close()
    assert reply.startswith(b"HTTP/1.1 200") and reply.endswith(b'{"ok":true}')


def test_connections_past_the_cap_are_closed_at_once(server):
    held = [socket.create_connection(("127.0.0.1", server)) for _ in range(2)]
    time.sleep(0.1)
    extra = socket.create_connection(("127.0.0.1", server))
    assert _closed_within(extra, 0.4)  # well before the header timeout
    for c in [*held, extra]:
        c.close()
