"""Load test, run by hand: ``python tests/benchmarks/load.py [--clients 8] [--seconds 20]``.

Starts ``python -m service`` on 127.0.0.1 at a free port in a subprocess (as the README runs
it: its default processes and compute slots unless ``--workers`` / ``--pool-size`` are given;
``--baseline`` first runs one process with 2 compute slots, the earlier default, and prints
the throughput ratio of the two measured in the same run), runs N concurrent
clients for a fixed time against it (``--mix service``: selections on the shipped demo data,
predictions and transform look-ups; ``--mix selections``: only default-search selections of
2,000 invented rows x 1 predictor, the issue's throughput case), probes ``/healthz`` every 50 ms meanwhile, then stops the server.

Prints throughput, latency percentiles per endpoint, counts by status (503 with Retry-After
is the documented back-pressure, counted apart from errors), connection errors, and the
health-endpoint latency under load as a ratio to the same probe against the idle server,
measured in the same run.  Finally checks that /metrics (summed over worker processes)
counted every request the clients sent.  Traffic goes to 127.0.0.1 only and is bounded in
count and time.
"""

from __future__ import annotations

import argparse
import http.client
import json
import os
import socket
import statistics
import subprocess
import sys
import threading
import time
from collections import Counter, defaultdict
from pathlib import Path

ROOT = Path(__file__).resolve().parents[2]
EXAMPLES = ROOT / "openapi_examples"
MAX_SECONDS, MAX_CLIENTS, MAX_REQUESTS = 300, 64, 200_000


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def percentile(values: list[float], q: float) -> float:
    if not values:
        return float("nan")
    v = sorted(values)
    return v[min(len(v) - 1, round(q / 100 * (len(v) - 1)))]


class Server:
    """``python -m service`` on 127.0.0.1; ``workers`` / ``pool_size`` None: its defaults."""

    def __init__(self, port: int, workers: int | None, pool_size: int | None):
        env = {**os.environ, "BESTSCALE_LOG_LEVEL": "warning"}
        for var in ("BESTSCALE_WORKERS", "BESTSCALE_POOL_SIZE"):
            env.pop(var, None)  # the defaults unless given below
        if pool_size is not None:
            env["BESTSCALE_POOL_SIZE"] = str(pool_size)
        flags = [] if workers is None else ["--workers", str(workers)]
        self.port = port
        self.proc = subprocess.Popen(
            [sys.executable, "-m", "service", "--host", "127.0.0.1", "--port", str(port), *flags],
            cwd=ROOT,
            env=env,
            stdout=subprocess.DEVNULL,
            stderr=subprocess.PIPE,
        )

    def wait_ready(self, timeout: float = 180) -> float:
        t0 = time.monotonic()
        while time.monotonic() - t0 < timeout:
            if self.proc.poll() is not None:
                raise SystemExit("server exited: " + self.proc.stderr.read().decode()[-2000:])
            try:
                c = http.client.HTTPConnection("127.0.0.1", self.port, timeout=2)
                c.request("GET", "/healthz")
                if c.getresponse().status == 200:
                    return time.monotonic() - t0
            except OSError:
                time.sleep(0.25)
        raise SystemExit("server did not become ready")

    def processes(self) -> tuple[int, float]:
        """(server processes, their resident memory in MiB): the supervisor and its workers
        (uvicorn's own children; the multiprocessing helper counted in the memory)."""
        import psutil

        top = psutil.Process(self.proc.pid)
        procs = [top, *top.children(recursive=True)]
        workers = [
            p for p in procs if "multiprocessing.resource_tracker" not in " ".join(p.cmdline())
        ]
        return max(1, len(workers) - 1), sum(p.memory_info().rss for p in procs) / 2**20

    def cpu_seconds(self) -> float:
        """User + system CPU seconds of the server's processes so far."""
        import psutil

        top = psutil.Process(self.proc.pid)
        total = 0.0
        for p in [top, *top.children(recursive=True)]:
            try:
                t = p.cpu_times()
            except psutil.Error:
                continue
            total += t.user + t.system
        return total

    def stop(self) -> None:
        self.proc.terminate()
        try:
            self.proc.wait(40)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait(10)


def selection_only_mix(rows: int) -> list[tuple[str, str, bytes | None]]:
    """Default-search selections on ``rows`` invented rows x 1 predictor (nothing else)."""
    sys.path.insert(0, str(ROOT))
    from tests.benchmarks._common import water_mains

    bodies = []
    for seed in range(4):  # four tables, so no cache could serve a repeat
        cols = water_mains(rows, 1, seed=seed)
        req = {
            "data": {"columns": {k: v.tolist() for k, v in cols.items()}},
            "response": "repair_cost",
            "predictors": ["x0"],
        }
        bodies.append(("POST", "/v1/selections", json.dumps(req).encode()))
    return bodies


def request_mix() -> list[tuple[str, str, bytes | None]]:
    sel = json.loads((EXAMPLES / "selections.request.json").read_text())
    sel["validation"] = {**sel.get("validation", {}), "repeats": 1}
    sel.pop("units", None)
    sel["transforms"] = {"response": ["identity", "log", "sqrt"], "predictors": ["identity", "log"]}
    pred = json.loads((EXAMPLES / "predictions.request.json").read_text())
    return [
        ("POST", "/v1/selections", json.dumps(sel).encode()),
        ("POST", "/v1/predictions", json.dumps(pred).encode()),
        ("POST", "/v1/predictions", json.dumps(pred).encode()),
        ("GET", "/v1/transforms", None),
    ]


class Tally:
    def __init__(self):
        self.lock = threading.Lock()
        self.latency: dict[str, list[float]] = defaultdict(list)
        self.status: Counter = Counter()
        self.errors: Counter = Counter()
        self.retry_after_missing = 0
        self.sent = 0

    def add(self, path: str, status: int, dt: float, retry_after: str | None) -> None:
        with self.lock:
            self.sent += 1
            self.status[(path, status)] += 1
            if status == 200:
                self.latency[path].append(dt)
            if status == 503 and not retry_after:
                self.retry_after_missing += 1


def client(port: int, stop: float, mix, tally: Tally, offset: int) -> None:
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=120)
    i = offset
    while time.monotonic() < stop and tally.sent < MAX_REQUESTS:
        method, path, body = mix[i % len(mix)]
        i += 1
        t0 = time.perf_counter()
        try:
            headers = {"Content-Type": "application/json"} if body is not None else {}
            conn.request(method, path, body=body, headers=headers)
            r = conn.getresponse()
            r.read()
            tally.add(path, r.status, time.perf_counter() - t0, r.getheader("Retry-After"))
            if r.status == 503:
                time.sleep(min(float(r.getheader("Retry-After") or 1), 2) / 10)
        except (OSError, http.client.HTTPException) as exc:
            with tally.lock:
                tally.errors[type(exc).__name__] += 1
            conn.close()
            conn = http.client.HTTPConnection("127.0.0.1", port, timeout=120)
    conn.close()


def probe_health(port: int, stop: float, out: list[float], every: float = 0.05) -> None:
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=30)
    while time.monotonic() < stop:
        t0 = time.perf_counter()
        try:
            conn.request("GET", "/healthz")
            r = conn.getresponse()
            r.read()
            if r.status == 200:
                out.append(time.perf_counter() - t0)
        except (OSError, http.client.HTTPException):
            out.append(float("inf"))
            conn.close()
            conn = http.client.HTTPConnection("127.0.0.1", port, timeout=30)
        time.sleep(every)
    conn.close()


def scrape_total(port: int) -> float:
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=30)
    conn.request("GET", "/metrics")
    text = conn.getresponse().read().decode()
    total = 0.0
    for line in text.splitlines():
        if (
            line.startswith("bestscale_requests_total{")
            and 'route="/metrics"' not in line
            and 'route="/healthz"' not in line
        ):
            total += float(line.rsplit(" ", 1)[1])
    return total


def run(args, workers: int | None, pool_size: int | None, clients: int, seconds: float) -> float:
    """One server, one load; prints its figures and returns the successful selections a
    second (all successful requests with ``--mix service``)."""
    server = Server(free_port(), workers, pool_size)
    try:
        ready = server.wait_ready()
        port = server.port
        n_procs, rss = server.processes()
        idle: list[float] = []
        probe_health(port, time.monotonic() + 3, idle)  # baseline: the idle server
        mix = request_mix() if args.mix == "service" else selection_only_mix(args.rows)
        tally = Tally()
        health: list[float] = []
        stop = time.monotonic() + seconds
        threads = [
            threading.Thread(target=client, args=(port, stop, mix, tally, k))
            for k in range(clients)
        ]
        threads.append(threading.Thread(target=probe_health, args=(port, stop, health)))
        t0 = time.monotonic()
        cpu0 = server.cpu_seconds()
        for t in threads:
            t.start()
        for t in threads:
            t.join(seconds + 150)
        wall = time.monotonic() - t0
        cpu = server.cpu_seconds() - cpu0
        counted = scrape_total(port)
    finally:
        server.stop()

    ok = sum(n for (p, s), n in tally.status.items() if s == 200)
    busy = sum(n for (p, s), n in tally.status.items() if s == 503)
    client_err = sum(n for (p, s), n in tally.status.items() if 400 <= s < 500)
    server_err = sum(n for (p, s), n in tally.status.items() if s >= 500 and s != 503)
    described = (
        f"{'default ' if workers is None else ''}{n_procs} worker process(es), "
        f"{pool_size if pool_size is not None else 'default'} compute slots per process"
    )
    print(
        f"server: {described}, ready after {ready:.1f} s, resident memory {rss:.0f} MiB "
        "(all its processes, before the load)"
    )
    print(
        f"load: {clients} clients for {seconds:g} s (wall {wall:.1f} s), "
        f"{tally.sent} requests answered"
    )
    print(f"throughput: {ok / wall:.1f} successful requests/s ({tally.sent / wall:.1f} answered/s)")
    print(
        f"server CPU: {cpu:.1f} s in {wall:.1f} s ({cpu / wall:.2f} cores busy on average), "
        f"{cpu / max(ok, 1):.3f} s per successful request (503 answers included)"
    )
    for path, lat in sorted(tally.latency.items()):
        print(
            f"  {path:18s} n={len(lat):6d}  p50={percentile(lat, 50) * 1e3:8.1f} ms  "
            f"p95={percentile(lat, 95) * 1e3:8.1f} ms  p99={percentile(lat, 99) * 1e3:8.1f} ms"
        )
    print(
        f"status: 200={ok}  503 busy={busy} (without Retry-After: {tally.retry_after_missing})  "
        f"4xx={client_err}  5xx={server_err}  connection errors={sum(tally.errors.values())} "
        f"{dict(tally.errors) if tally.errors else ''}"
    )
    h_ok = [h for h in health if h != float("inf")]
    base = statistics.median(idle) if idle else float("nan")
    print(
        f"health idle:  n={len(idle)} p50={base * 1e3:.2f} ms  p99={percentile(idle, 99) * 1e3:.2f} ms"
    )
    print(
        f"health load:  n={len(health)} failed={len(health) - len(h_ok)} "
        f"p50={percentile(h_ok, 50) * 1e3:.2f} ms  p95={percentile(h_ok, 95) * 1e3:.2f} ms  "
        f"p99={percentile(h_ok, 99) * 1e3:.2f} ms  max={max(h_ok, default=float('nan')) * 1e3:.1f} ms"
    )
    if idle and h_ok:
        print(
            f"health ratio loaded/idle: p50 x{percentile(h_ok, 50) / base:.1f}  "
            f"p99 x{percentile(h_ok, 99) / percentile(idle, 99):.1f}"
        )
    print(
        f"metrics: /metrics counted {counted:.0f} of the {tally.sent} load requests "
        f"({'consistent' if counted == tally.sent else 'MISMATCH'})"
    )
    if server_err or tally.errors or counted != tally.sent:
        raise SystemExit(1)
    return ok / wall


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--clients", type=int, default=8)
    ap.add_argument("--seconds", type=float, default=20)
    ap.add_argument("--workers", type=int, default=None, help="default: the server's own")
    ap.add_argument("--pool-size", type=int, default=None, help="default: the server's own")
    ap.add_argument(
        "--baseline",
        action="store_true",
        help="first run 1 worker process with 2 compute slots (the earlier default) and print "
        "the ratio",
    )
    ap.add_argument("--mix", choices=("service", "selections"), default="service")
    ap.add_argument("--rows", type=int, default=2000, help="rows per selection (--mix selections)")
    args = ap.parse_args()
    clients = max(1, min(args.clients, MAX_CLIENTS))
    seconds = max(1.0, min(args.seconds, MAX_SECONDS))
    print(f"machine: {os.cpu_count()} cores, load average {os.getloadavg()[0]:.2f} at start")
    base = None
    if args.baseline:
        print("-- baseline: 1 worker process, 2 compute slots")
        base = run(args, 1, 2, clients, seconds)
        print("-- as configured")
    rate = run(args, args.workers, args.pool_size, clients, seconds)
    if base is not None:
        print(
            f"ratio: {rate / base:.2f}x the baseline's successful requests a second"
            if base
            else "ratio: baseline had none"
        )
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
