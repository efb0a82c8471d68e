"""Prometheus metrics, correct with one server process or several.

With one process the metrics live in the default registry as usual.  With several
(``python -m service --workers N`` sets ``PROMETHEUS_MULTIPROC_DIR`` before the workers
start) every process writes its values to memory-mapped files in that directory and the
default registry holds only a collector that adds them up at scrape time, so any worker
answering ``GET /metrics`` reports the totals of all of them.  Live gauges of a worker that
died are dropped at the next scrape.
"""

from __future__ import annotations

import contextlib
import glob
import os
import re

from prometheus_client import (
    CONTENT_TYPE_LATEST,
    GC_COLLECTOR,
    PLATFORM_COLLECTOR,
    PROCESS_COLLECTOR,
    REGISTRY,
    Counter,
    Gauge,
    Histogram,
    generate_latest,
    multiprocess,
)

MULTIPROCESS_DIR = os.environ.get("PROMETHEUS_MULTIPROC_DIR") or None

_registry = None if MULTIPROCESS_DIR else REGISTRY

REQUESTS = Counter(
    "bestscale_requests_total",
    "HTTP requests answered, by route and status",
    ["route", "status"],
    registry=_registry,
)
LATENCY = Histogram(
    "bestscale_request_seconds",
    "time to answer a request, by route and status",
    ["route", "status"],
    registry=_registry,
    buckets=(0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1, 2.5, 5, 10, 30, 60, 120, 300, 600),
)
REJECTED = Counter(
    "bestscale_rejected_total",
    "requests answered with a problem (4xx or 503), by problem kind",
    ["reason"],
    registry=_registry,
)
CANDIDATES = Counter(
    "bestscale_candidates_scored_total",
    "candidate specifications scored by cross-validation",
    registry=_registry,
)
ROWS = Counter(
    "bestscale_rows_total", "table rows used by answered requests", ["route"], registry=_registry
)
ERRORS = Counter(
    "bestscale_internal_errors_total",
    "requests that failed inside the service (500)",
    ["route"],
    registry=_registry,
)
BUSY = Gauge(
    "bestscale_pool_busy",
    "compute slots in use now (all processes)",
    registry=_registry,
    multiprocess_mode="livesum",
)
CAPACITY = Gauge(
    "bestscale_pool_capacity",
    "compute slots available (all processes)",
    registry=_registry,
    multiprocess_mode="livesum",
)
IN_FLIGHT = Gauge(
    "bestscale_requests_in_flight",
    "HTTP requests being answered now",
    registry=_registry,
    multiprocess_mode="livesum",
)

_LIVE_FILE = re.compile(r"gauge_live\w+?_(\d+)\.db$")


def _alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True
    return True


def _install_multiprocess_collector() -> None:
    class _Collector(multiprocess.MultiProcessCollector):
        def collect(self):
            # a worker that died without clean-up leaves its live gauges behind
            for path in glob.glob(os.path.join(self._path, "gauge_live*.db")):
                m = _LIVE_FILE.search(os.path.basename(path))
                if m and not _alive(int(m.group(1))):
                    multiprocess.mark_process_dead(int(m.group(1)), self._path)
            return super().collect()

    for collector in (PROCESS_COLLECTOR, PLATFORM_COLLECTOR, GC_COLLECTOR):
        # per-process figures would describe whichever worker was scraped
        with contextlib.suppress(KeyError):
            REGISTRY.unregister(collector)
    _Collector(REGISTRY, MULTIPROCESS_DIR)


def mark_this_process_dead() -> None:
    """At a worker's clean shutdown: its live gauges stop counting."""
    if MULTIPROCESS_DIR:
        multiprocess.mark_process_dead(os.getpid(), MULTIPROCESS_DIR)


def exposition() -> tuple[bytes, str]:
    """The text format of every metric (summed over processes) and its media type."""
    return generate_latest(REGISTRY), CONTENT_TYPE_LATEST


if MULTIPROCESS_DIR:
    _install_multiprocess_collector()
