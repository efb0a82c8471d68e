"""Compute slots (service/api/pool.py): one slot per computation, a 503 problem with
Retry-After past capacity (RFC 9110 section 10.2.3), and every slot given back.
"""

from __future__ import annotations

import threading

import pytest
from service.api import pool
from service.settings import get_settings


@pytest.fixture
def make_app(monkeypatch):
    """Settings for one test (the pool reads its capacity from them)."""

    def build(**env):
        for k, v in env.items():
            monkeypatch.setenv(f"BESTSCALE_{k.upper()}", str(v))
        get_settings.cache_clear()

    yield build
    monkeypatch.undo()
    get_settings.cache_clear()


def test_the_slot_gate_itself_refuses_past_capacity(make_app):
    make_app(pool_size=2)
    with pool.compute_slot(), pool.compute_slot():
        with pytest.raises(Exception) as info, pool.compute_slot():
            pass
        assert info.value.status == 503 and "Retry-After" in info.value.headers
    assert pool.busy() == 0


def test_slots_are_counted_and_returned_even_on_error(make_app):
    make_app(pool_size=3)
    assert pool.capacity() == 3 and not pool.saturated()
    with pytest.raises(KeyError), pool.compute_slot():
        assert pool.busy() == 1
        raise KeyError("boom")
    assert pool.busy() == 0


def test_concurrent_requests_never_exceed_capacity(make_app):
    make_app(pool_size=2)
    held, refused, lock, peak = [], [], threading.Lock(), [0]
    gate = threading.Barrier(6)

    def worker():
        gate.wait()
        try:
            with pool.compute_slot():
                with lock:
                    peak[0] = max(peak[0], pool.busy())
                    held.append(1)
                threading.Event().wait(0.05)
        except Exception as exc:  # the 503 problem
            refused.append(exc.status)

    threads = [threading.Thread(target=worker) for _ in range(6)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert peak[0] <= 2 and len(held) + len(refused) == 6 and set(refused) <= {503}
    assert pool.busy() == 0
