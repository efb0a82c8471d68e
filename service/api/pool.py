"""A bounded number of compute-bound requests at a time; the rest get 503 with Retry-After.

Routes that compute are plain ``def`` functions run in the framework's thread pool, so the
event loop (and ``/healthz``) stays responsive; this gate keeps the number of computations
running at once at ``pool_size`` (setting BESTSCALE_POOL_SIZE) instead of queueing without
bound.  ``saturated()`` lets the outer middleware refuse a request before its body is read
when every slot is already taken; ``compute_slot()`` is the authoritative gate.  The slots
are this process's: the server runs one process per core by default (BESTSCALE_WORKERS), each
with its own slots and its own 503 answers.
"""

from __future__ import annotations

import threading
from contextlib import contextmanager
from typing import TypedDict

from ..settings import get_settings
from .errors import ProblemError
from .metrics import BUSY, CAPACITY

RETRY_AFTER_S = 2

_lock = threading.Lock()


class _State(TypedDict):
    busy: int
    capacity: int | None


_state: _State = {"busy": 0, "capacity": None}


def capacity() -> int:
    """Compute slots of this process (setting BESTSCALE_POOL_SIZE)."""
    cap = get_settings().pool_size
    if _state["capacity"] != cap:
        CAPACITY.set(cap)
        _state["capacity"] = cap
    return cap


def busy_problem(cap: int) -> ProblemError:
    return ProblemError(
        503,
        "busy",
        "Service busy",
        f"all {cap} compute slots are in use; retry after {RETRY_AFTER_S} s",
        headers={"Retry-After": str(RETRY_AFTER_S)},
    )


def busy() -> int:
    """Compute slots in use now in this process."""
    return _state["busy"]


def saturated() -> bool:
    """True when a new computation would be refused right now (a hint; no slot is held)."""
    return _state["busy"] >= capacity()


@contextmanager
def compute_slot():
    """Hold one compute slot for the duration of the block, or raise a 503 problem."""
    cap = capacity()
    with _lock:
        if _state["busy"] >= cap:
            raise busy_problem(cap)
        _state["busy"] += 1
        BUSY.inc()
    try:
        yield
    finally:
        with _lock:
            _state["busy"] -= 1
            BUSY.dec()
