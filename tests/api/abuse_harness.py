"""Hostile requests against a real server process, with time and peak-memory measurement.

Shared by the abuse tests (reduced sizes, bounded time) and the hand-run benchmark
``tests/benchmarks/abuse.py`` (which can point the same cases at another source tree to
measure before/after figures).  Memory is the server process's peak resident set size
(``VmHWM`` in ``/proc/<pid>/status``), reset before each case by writing 5 to
``/proc/<pid>/clear_refs`` (Linux ``proc(5)``), so the growth of one case is
``VmHWM after - VmRSS before``.
"""

from __future__ import annotations

import io
import json
import os
import socket
import subprocess
import sys
import threading
import time
from contextlib import contextmanager
from dataclasses import dataclass, field

import numpy as np


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _status_kb(pid: int, key: str) -> int:
    with open(f"/proc/{pid}/status") as fh:
        for line in fh:
            if line.startswith(key + ":"):
                return int(line.split()[1])
    return 0


class Server:
    """``python -m service`` in a subprocess on a free port, with the given settings."""

    def __init__(self, env: dict[str, str] | None = None, source: str | None = None):
        self.port = free_port()
        full = {**os.environ, **(env or {})}
        full["BESTSCALE_PORT"] = str(self.port)
        full["BESTSCALE_LOG_LEVEL"] = "warning"
        # one server process unless asked otherwise: the measures read the memory of the
        # process started here, which then is the one answering
        full["BESTSCALE_WORKERS"] = (env or {}).get("BESTSCALE_WORKERS", "1")
        if source:
            full["PYTHONPATH"] = source
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "service"],
            env=full,
            cwd=source or None,
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            try:
                if self.raw(b"GET /healthz HTTP/1.1\r\nHost: x\r\n\r\n", 2.0).startswith(
                    b"HTTP/1.1 200"
                ):
                    return
            except OSError:
                time.sleep(0.2)
        self.close()
        raise RuntimeError("the server did not start")

    @property
    def pid(self) -> int:
        return self.proc.pid

    def close(self) -> None:
        if self.proc.poll() is None:
            self.proc.terminate()
            try:
                self.proc.wait(10)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(10)

    def alive(self) -> bool:
        return self.proc.poll() is None

    def raw(self, data: bytes, timeout: float = 30.0) -> bytes:
        """Send raw bytes on a new connection; the whole answer (until the server closes or
        one response with Content-Length arrived)."""
        with socket.create_connection(("127.0.0.1", self.port), timeout=timeout) as s:
            s.sendall(data)
            return _read_response(s)

    def request(
        self,
        method: str,
        path: str,
        body: bytes = b"",
        content_type: str = "application/json",
        headers: dict[str, str] | None = None,
        timeout: float = 300.0,
    ) -> tuple[int, dict[str, str], bytes]:
        head = [f"{method} {path} HTTP/1.1", "Host: 127.0.0.1", "Connection: close"]
        if body or method == "POST":
            head += [f"Content-Type: {content_type}", f"Content-Length: {len(body)}"]
        head += [f"{k}: {v}" for k, v in (headers or {}).items()]
        answer = self.raw(("\r\n".join(head) + "\r\n\r\n").encode() + body, timeout)
        return parse_response(answer)


def _read_response(s: socket.socket) -> bytes:
    buf = b""
    while True:
        try:
            chunk = s.recv(65536)
        except (ConnectionResetError, TimeoutError):
            break
        if not chunk:
            break
        buf += chunk
        if b"\r\n\r\n" in buf:
            head, _, rest = buf.partition(b"\r\n\r\n")
            for line in head.split(b"\r\n")[1:]:
                k, _, v = line.partition(b":")
                if k.strip().lower() == b"content-length" and len(rest) >= int(v.strip()):
                    return buf
    return buf


def parse_response(answer: bytes) -> tuple[int, dict[str, str], bytes]:
    head, _, body = answer.partition(b"\r\n\r\n")
    lines = head.decode("latin-1").split("\r\n")
    status = int(lines[0].split()[1]) if lines and len(lines[0].split()) > 1 else 0
    headers = {}
    for line in lines[1:]:
        k, _, v = line.partition(":")
        headers[k.strip().lower()] = v.strip()
    return status, headers, body


@dataclass
class Measured:
    status: int
    seconds: float
    rss_growth_mb: float
    health_max_s: float
    detail: str = ""
    extra: dict = field(default_factory=dict)


@contextmanager
def health_probe(server: Server, every: float = 0.2):
    """Poll /healthz during the block; yields a dict whose 'max' is the slowest answer (s)."""
    out = {"max": 0.0, "failed": 0}
    stop = threading.Event()

    def run():
        while not stop.is_set():
            t = time.perf_counter()
            try:
                status, _, _ = server.request("GET", "/healthz", timeout=30)
                if status != 200:
                    out["failed"] += 1
            except OSError:
                out["failed"] += 1
            out["max"] = max(out["max"], time.perf_counter() - t)
            stop.wait(every)

    th = threading.Thread(target=run, daemon=True)
    th.start()
    try:
        yield out
    finally:
        stop.set()
        th.join(35)


def measure(server: Server, fn) -> Measured:
    """Run ``fn(server) -> (status, detail)`` and measure time, peak RSS growth and health."""
    pid = server.pid
    try:
        with open(f"/proc/{pid}/clear_refs", "w") as fh:
            fh.write("5")  # reset the peak RSS
    except OSError:
        pass
    before = _status_kb(pid, "VmRSS")
    with health_probe(server) as health:
        t = time.perf_counter()
        try:
            status, detail = fn(server)
        except OSError as exc:  # the connection was dropped (or the server died)
            status, detail = 0, f"connection error: {exc!r}"
        seconds = time.perf_counter() - t
    peak = _status_kb(pid, "VmHWM") if server.alive() else 0
    return Measured(status, seconds, max(0, peak - before) / 1024.0, health["max"], detail)


# ------------------------------------------------------------------- the cases
def _json(server, path, obj, **kw):
    status, _, body = server.request("POST", path, json.dumps(obj).encode(), **kw)
    return status, _detail(body)


def _detail(body: bytes) -> str:
    """A problem's detail, or the size of any other answer."""
    try:
        doc = json.loads(body)
        detail = doc.get("detail")
        errors = [e.get("detail", "") for e in doc.get("errors") or [] if isinstance(e, dict)]
        if detail and errors:
            detail = detail + " | " + " | ".join(errors)
    except (ValueError, AttributeError):
        detail = None
    return str(detail)[:400] if detail else f"answer of {len(body)} bytes"


def multipart(
    parts: list[tuple[str, str | None, bytes]], boundary: str = "abuse-boundary", close: bool = True
) -> tuple[bytes, str]:
    out = b""
    for name, filename, data in parts:
        disp = f'form-data; name="{name}"' + (f'; filename="{filename}"' if filename else "")
        out += f"--{boundary}\r\nContent-Disposition: {disp}\r\n\r\n".encode() + data + b"\r\n"
    if close:
        out += f"--{boundary}--\r\n".encode()
    return out, f"multipart/form-data; boundary={boundary}"


def parquet_bomb(rows: int) -> bytes:
    """A small zstd Parquet file of ``rows`` rows and two constant columns."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    table = pa.table({"y": np.ones(rows), "x": np.ones(rows)})
    buf = io.BytesIO()
    pq.write_table(table, buf, compression="zstd")
    return buf.getvalue()


def case_parquet_bomb(rows: int):
    raw = parquet_bomb(rows)
    options = json.dumps({"response": "y", "predictors": ["x"]}).encode()
    body, ctype = multipart([("file", "t.parquet", raw), ("options", None, options)])

    def run(server):
        status, _, answer = server.request(
            "POST", "/v1/selections", body, content_type=ctype, timeout=600
        )
        return status, _detail(answer)

    return run, len(body)


def _table(n: int = 60, seed: int = 1) -> dict:
    """Invented: minutes per courier delivery against parcel weight."""
    rng = np.random.default_rng(seed)
    x = rng.uniform(1, 30, n)
    y = np.exp(2 + 0.4 * np.log(x) + rng.normal(0, 0.15, n))
    return {"y": y.round(4).tolist(), "x": x.round(4).tolist()}


def case_wide(rows: int, predictors: int, time_limit: float):
    """Invented: delivery minutes against many route measurements (a wide design, whose
    listed entries' condition tests cost far more than a narrow one's)."""
    rng = np.random.default_rng(7)
    X = rng.uniform(1, 30, (rows, predictors))
    y = np.exp(2 + 0.4 * np.log(X).mean(axis=1) + rng.normal(0, 0.15, rows))
    cols = {"y": y.round(4).tolist()} | {
        f"m{j}": X[:, j].round(4).tolist() for j in range(predictors)
    }
    req = {
        "data": {"columns": cols},
        "response": "y",
        "predictors": [f"m{j}" for j in range(predictors)],
        "limits": {"time_limit_s": time_limit},
    }
    return (lambda server: _json(server, "/v1/selections", req, timeout=600)), len(json.dumps(req))


def case_many_columns(extra: int):
    cols = _table()
    for j in range(extra):
        cols[f"c{j}"] = [1.0]
    req = {"data": {"columns": cols}, "response": "y", "predictors": ["x"]}
    return (lambda server: _json(server, "/v1/selections", req, timeout=600)), len(json.dumps(req))


def case_csv_duplicate_header(names: int):
    header = [f"n{j}" for j in range(names)] + ["n0"]
    text = ",".join(["y", "x", *header]) + "\n"
    t = _table(5)
    for a, b in zip(t["y"], t["x"], strict=True):
        text += f"{a},{b}" + ",1" * len(header) + "\n"
    req = {"data": {"csv": text}, "response": "y", "predictors": ["x"]}
    return (lambda server: _json(server, "/v1/selections", req, timeout=600)), len(json.dumps(req))


def case_long_level(chars: int, top: int = 100):
    t = _table(40)
    level = ["A" * chars if i % 2 else "B" for i in range(40)]
    req = {
        "data": {"columns": {**t, "g": level}},
        "response": "y",
        "predictors": ["x", "g"],
        "top": top,
    }
    return (lambda server: _json(server, "/v1/selections", req, timeout=600)), len(json.dumps(req))


def case_tiny_lambda(lam: float):
    req = {
        "data": {"columns": _table(200)},
        "specification": {
            "response": {"column": "y", "transform": {"name": "box_cox", "lambda": lam}},
            "predictors": [{"column": "x", "transform": {"name": "log"}}],
        },
    }
    return (lambda server: _json(server, "/v1/diagnostics", req, timeout=600)), len(json.dumps(req))


def case_tiny_power(q: float):
    req = {
        "data": {"columns": _table(200)},
        "response": "y",
        "predictors": ["x"],
        "transforms": {"response": [{"name": "power", "exponent": q}]},
    }
    return (lambda server: _json(server, "/v1/selections", req, timeout=600)), len(json.dumps(req))


def issued_model(server) -> dict:
    status, _, body = server.request(
        "POST",
        "/v1/selections",
        json.dumps(
            {"data": {"columns": _table(80)}, "response": "y", "predictors": ["x"]}
        ).encode(),
    )
    assert status == 200, body[:300]
    return json.loads(body)["ranking"][0]["model"]


def _rehash(model: dict) -> dict:
    """Recompute the plain checksum the way anyone can (SHA-256 of the canonical JSON)."""
    import hashlib

    def canon(v):
        if isinstance(v, dict):
            return {k: canon(x) for k, x in v.items()}
        if isinstance(v, list):
            return [canon(x) for x in v]
        if isinstance(v, (int, float)) and not isinstance(v, bool):
            return float(v)
        return v

    clean = canon({k: v for k, v in model.items() if k not in ("checksum", "signature")})
    text = json.dumps(clean, sort_keys=True, separators=(",", ":"))
    model["checksum"] = hashlib.sha256(text.encode()).hexdigest()
    return model


def case_forged_model(kind: str, residuals: int = 200_000):
    def run(server):
        model = issued_model(server)
        if kind == "coefficient":
            model["coefficients"][1] += 5.0
        elif kind == "variance":
            model["coefficients"][0] = 700.0
            model["residual_variance"] = 1e300
        elif kind == "exponent":
            model["specification"]["response"]["transform"] = {
                "name": "power",
                "exponent": 1e-300,
            }
        elif kind == "residuals":
            model["residuals"]["values"] = (
                np.random.default_rng(0).normal(0, 0.1, residuals).tolist()
            )
        _rehash(model)
        req = {"model": model, "data": {"columns": {"x": [5.0, 10.0]}}}
        status, _, body = server.request(
            "POST", "/v1/predictions", json.dumps(req).encode(), timeout=600
        )
        detail = _detail(body)
        if status == 200:
            detail = "mean " + str(json.loads(body)["predictions"][0]["mean"])
        return status, detail

    return run, 0


def case_deadline(time_limit: float, resamples: int = 1000):
    req = {
        "data": {"columns": _table(120)},
        "response": "y",
        "predictors": ["x"],
        "validation": {"folds": 50, "repeats": 50},
        "top": 100,
        "trust": {"stability": True, "optimism": True, "resamples": resamples},
        "limits": {"time_limit_s": time_limit},
    }
    return (lambda server: _json(server, "/v1/selections", req, timeout=600)), len(json.dumps(req))


def case_deep_nesting(depth: int):
    body = b'{"a":"x\\":","b":' + b"[" * depth + b"]" * depth + b"}"

    def run(server):
        status, _, answer = server.request("POST", "/v1/selections", body)
        return status, _detail(answer)

    return run, len(body)


def case_length_and_chunked():
    def run(server):
        req = (
            b"POST /v1/selections HTTP/1.1\r\nHost: x\r\nContent-Type: application/json\r\n"
            b"Content-Length: 4\r\nTransfer-Encoding: chunked\r\nConnection: close\r\n\r\n"
            b"2\r\n{}\r\n0\r\n\r\n"
        )
        status, _, answer = parse_response(server.raw(req))
        return status, _detail(answer)

    return run, 0


def case_repeated_options():
    def run(server):
        body, ctype = multipart(
            [
                ("file", "t.csv", b"y,x\n1,2\n2,3\n3,5\n4,4\n5,7\n6,8\n"),
                ("options", None, b'{"response": "y", "predictors": ["x"]}'),
                ("options", None, b'{"response": "x", "predictors": ["y"]}'),
            ]
        )
        status, _, answer = server.request("POST", "/v1/selections", body, content_type=ctype)
        return status, _detail(answer)

    return run, 0


def case_unclosed_multipart():
    def run(server):
        body, ctype = multipart(
            [
                ("file", "t.csv", b"y,x\n1,2\n2,3\n3,5\n4,4\n5,7\n6,8\n"),
                ("options", None, b'{"response": "y", "predictors": ["x"]}'),
            ],
            close=False,
        )
        status, _, answer = server.request("POST", "/v1/selections", body, content_type=ctype)
        return status, _detail(answer)

    return run, 0


def slow_headers(server: Server, connections: int, every: float, hold: float) -> int:
    """Open connections that send one header line every ``every`` s for ``hold`` s; the
    number still open at the end."""
    socks = []
    for _ in range(connections):
        s = socket.create_connection(("127.0.0.1", server.port), timeout=5)
        s.sendall(b"GET /healthz HTTP/1.1\r\nHost: x\r\n")
        socks.append(s)
    t_end = time.monotonic() + hold
    alive = list(socks)
    while time.monotonic() < t_end and alive:
        time.sleep(every)
        still = []
        for s in alive:
            try:
                s.sendall(b"X-Slow: 1\r\n")
                still.append(s)
            except OSError:
                pass
        alive = still
    # a closed connection shows on the next send or as end of stream
    open_now = 0
    for s in alive:
        try:
            s.setblocking(False)
            data = s.recv(1)
            open_now += 0 if data == b"" else 1
        except BlockingIOError:
            open_now += 1
        except OSError:
            pass
    for s in socks:
        s.close()
    return open_now
