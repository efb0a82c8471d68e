"""The request's one deadline (service/selection/deadline.py): arithmetic on the monotonic
clock, and that it crosses process boundaries unchanged (worker processes read the same end)."""

from __future__ import annotations

import pickle
import time

from service.selection.deadline import Deadline


def test_a_deadline_counts_down_from_its_limit():
    before = time.monotonic()
    d = Deadline.after(2.5)
    assert d.limit_s == 2.5 and before + 2.5 <= d.at <= time.monotonic() + 2.5
    assert 0 < d.left() <= 2.5 and not d.passed()
    gone = Deadline(time.monotonic() - 0.1, 2.5)
    assert gone.passed() and gone.left() < 0


def test_a_part_with_its_own_limit_ends_at_the_earlier_of_the_two():
    d = Deadline.after(100)
    assert d.sooner(None) is d
    short = d.sooner(1.0)
    assert short.at < d.at and short.limit_s == 100  # messages keep the caller's number
    assert d.sooner(1000.0).at == d.at


def test_the_same_end_reaches_a_worker_process():
    d = Deadline.after(30)
    assert pickle.loads(pickle.dumps(d)) == d


def _left_in_a_child(d: Deadline) -> float:
    return d.left()


def test_a_worker_process_reads_the_same_clock():
    """time.monotonic is the system's clock since boot: another process on this machine
    sees the same end (the pool's workers and the trust resamples rely on it)."""
    import concurrent.futures
    import multiprocessing

    d = Deadline.after(30)
    ctx = multiprocessing.get_context("spawn")
    with concurrent.futures.ProcessPoolExecutor(1, mp_context=ctx) as pool:
        there = pool.submit(_left_in_a_child, d).result(timeout=60)
    here = d.left()
    assert 0 < here <= there <= 30  # asked there first, then here


def test_a_reserve_ends_the_work_before_it_that_much_sooner():
    d = Deadline.after(60)
    early = d.reserving(10.0)
    assert early.at == d.at - 10.0 and early.limit_s == 60  # the caller's number is kept
    assert d.reserving(-5.0).at == d.at and d.reserving(0.0) == d
