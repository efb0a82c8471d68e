"""The request's one deadline (service/selection/deadline.py): arithmetic on the wall clock,
and that it crosses process boundaries unchanged (worker processes read the same end)."""

from __future__ import annotations

import pickle
import time

from service.selection.deadline import Deadline


def test_a_deadline_counts_down_from_its_limit():
    before = time.time()
    d = Deadline.after(2.5)
    assert d.limit_s == 2.5 and before + 2.5 <= d.at <= time.time() + 2.5
    assert 0 < d.left() <= 2.5 and not d.passed()
    gone = Deadline(time.time() - 0.1, 2.5)
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
