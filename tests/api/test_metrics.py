"""Metrics with several worker processes: any process's scrape reports the sum over all of
them, and the live gauges of a process that is gone no longer count.

Each "worker" is a small Python process that imports only service.api.metrics, with
PROMETHEUS_MULTIPROC_DIR set as ``python -m service --workers N`` sets it.
"""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[2]

WORKER = """
import os, sys
from service.api import metrics
n, how = int(sys.argv[1]), sys.argv[2]
metrics.REQUESTS.labels("/healthz", "200").inc(n)
metrics.LATENCY.labels("/healthz", "200").observe(0.02 * n)
metrics.BUSY.inc()
metrics.CAPACITY.set(2)
if how == "clean":
    metrics.BUSY.dec()
    metrics.mark_this_process_dead()
elif how == "stay":
    print("ready", flush=True)
    sys.stdin.read()
os._exit(0)  # "crash": no clean-up at all
"""

SCRAPE = """
from service.api import metrics
print(metrics.exposition()[0].decode())
"""


def _run(code: str, *args: str, env: dict, **kw):
    return subprocess.Popen(
        [sys.executable, "-c", code, *args],
        env=env,
        cwd=ROOT,
        stdout=subprocess.PIPE,
        stdin=subprocess.PIPE,
        text=True,
        **kw,
    )


def _value(text: str, sample: str) -> float:
    for line in text.splitlines():
        if line.startswith(sample + " "):
            return float(line.rsplit(" ", 1)[1])
    raise AssertionError(f"{sample} not in the scrape:\n{text[:2000]}")


def test_counts_add_up_over_processes_and_dead_gauges_drop_out(tmp_path):
    env = {**os.environ, "PROMETHEUS_MULTIPROC_DIR": str(tmp_path)}
    for n, how in [("3", "clean"), ("4", "crash")]:
        p = _run(WORKER, n, how, env=env)
        p.communicate(timeout=60)
        assert p.returncode == 0
    alive = _run(WORKER, "5", "stay", env=env)
    try:
        assert alive.stdout.readline().strip() == "ready"
        scrape = _run(SCRAPE, env=env)
        text, _ = scrape.communicate(timeout=60)
    finally:
        alive.communicate("", timeout=60)
    # source: arithmetic of what the three workers recorded
    assert _value(text, 'bestscale_requests_total{route="/healthz",status="200"}') == 12
    assert _value(text, 'bestscale_request_seconds_count{route="/healthz",status="200"}') == 3
    assert _value(
        text, 'bestscale_request_seconds_sum{route="/healthz",status="200"}'
    ) == pytest.approx(0.02 * 12)
    # only the live worker's slot gauges count (the crashed one's are dropped at the scrape)
    assert _value(text, "bestscale_pool_busy") == 1
    assert _value(text, "bestscale_pool_capacity") == 2
    assert "process_cpu_seconds_total" not in text  # per-process figures would mislead


def test_entry_point_prepares_a_fresh_directory_only_for_several_workers(monkeypatch, tmp_path):
    from service.__main__ import metrics_dir

    # setenv first records the variable's state before the test, so the undo at teardown
    # also removes what metrics_dir(2) sets (a later subprocess would inherit a removed
    # directory otherwise)
    monkeypatch.setenv("PROMETHEUS_MULTIPROC_DIR", "")
    monkeypatch.delenv("PROMETHEUS_MULTIPROC_DIR")
    assert metrics_dir(1) == (None, False)
    made, ours = metrics_dir(2)
    try:
        assert ours and os.path.isdir(made) and os.environ["PROMETHEUS_MULTIPROC_DIR"] == made
    finally:
        os.rmdir(made)
    stale = tmp_path / "counter_123.db"
    stale.write_bytes(b"old")
    keep = tmp_path / "notes.txt"
    keep.write_text("operator file")
    monkeypatch.setenv("PROMETHEUS_MULTIPROC_DIR", str(tmp_path))
    assert metrics_dir(3) == (str(tmp_path), False)
    assert not stale.exists() and keep.exists()  # earlier runs' values would be added


def test_one_process_exposition_is_what_get_metrics_answers():
    from fastapi.testclient import TestClient
    from prometheus_client import CONTENT_TYPE_LATEST
    from prometheus_client.parser import text_string_to_metric_families
    from service.api import metrics
    from service.app import app

    text, media_type = metrics.exposition()
    # source: prometheus_client's own parser of the text exposition format
    names = {f.name for f in text_string_to_metric_families(text.decode())}
    assert {"bestscale_pool_busy", "bestscale_pool_capacity"} <= names
    # source: prometheus_client's CONTENT_TYPE_LATEST (the text format is text/plain)
    assert media_type == CONTENT_TYPE_LATEST and media_type.startswith("text/plain")
    r = TestClient(app).get("/metrics")
    assert r.status_code == 200 and r.headers["content-type"] == media_type
    assert names == {f.name for f in text_string_to_metric_families(r.text)}
