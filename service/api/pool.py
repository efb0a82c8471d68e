"""A bounded number of CPU-bound requests at a time; the rest get 503 with Retry-After.

Routes that compute are plain ``def`` functions run in the framework's thread
pool, so the event loop (and ``/healthz``) stays responsive; this gate keeps
the number of searches running at once at ``pool_size`` instead of queueing
without bound.
"""

from __future__ import annotations

import threading
from contextlib import contextmanager

from prometheus_client import Gauge

from ..errors import ProblemError
from ..middleware import REJECTED
from ..settings import get_settings

BUSY = Gauge("bestscale_pool_busy", "CPU-bound requests running now")
CAPACITY = Gauge("bestscale_pool_capacity", "CPU-bound requests allowed at once")

_lock = threading.Lock()
_state = {"busy": 0}


@contextmanager
def compute_slot():
    cap = get_settings().pool_size
    CAPACITY.set(cap)
    with _lock:
        if _state["busy"] >= cap:
            REJECTED.labels("busy").inc()
            raise ProblemError(503, "busy", "Service busy",
                               f"all {cap} compute slots are in use; retry shortly",
                               headers={"Retry-After": "2"})
        _state["busy"] += 1
        BUSY.set(_state["busy"])
    try:
        yield
    finally:
        with _lock:
            _state["busy"] -= 1
            BUSY.set(_state["busy"])
