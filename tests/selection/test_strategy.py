"""The screened search for many predictors against the exhaustive search over the same space,
its baselines and its budget.

The reference is the exhaustive search itself (every candidate scored on the original scale):
on small seeded problems the screened search must find the same lowest-error specification.
"""

from __future__ import annotations

import numpy as np
import pytest
from service.core.data import prepare
from service.selection.search import run_selection, select
from service.selection.search_setup import SearchOptions
from service.selection.strategy import EXHAUSTIVE_LIMIT

from tests.typed import predictors, responses


def _problem(seed: int, n: int = 220, p: int = 3):
    rng = np.random.default_rng(seed)
    cols = {f"x{j}": rng.uniform(0.5, 6.0, n) for j in range(p)}
    kind = seed % 3
    eta = 0.4
    for j, (_name, x) in enumerate(cols.items()):
        g = [np.log, np.sqrt, lambda v: v, np.square][(seed + j) % 4](x)
        eta = eta + (0.5 - 0.2 * j) * g / np.std(g)
    noise = rng.normal(0, 0.25, n)
    y = (
        np.exp(0.3 * eta + noise)
        if kind == 0
        else (
            np.maximum(2.0 + eta + noise, 0.05)
            if kind == 1
            else (1.5 + 0.3 * eta + 0.3 * noise) ** 2
        )
    )
    cols["y"] = y
    return prepare(
        {"columns": {k: v.tolist() for k, v in cols.items()}}, "y", [f"x{j}" for j in range(p)]
    )


SPACE = {
    "response_transforms": responses(["identity", "log", "sqrt"]),
    "predictor_transforms": predictors(["identity", "log", "sqrt", "square"]),
    "top": 1,
}


@pytest.mark.parametrize("seed", range(6))
def test_screened_search_finds_the_exhaustive_optimum(seed):
    prep = _problem(seed)
    full = run_selection(prep, SearchOptions(strategy="exhaustive", **SPACE), "t")
    smart = run_selection(prep, SearchOptions(strategy="screened", **SPACE), "t")
    assert full.search.complete is True
    assert full.search.scored + full.search.failed == 3 * 4**3
    # source: the exhaustive search over the same 192 candidates (same folds)
    assert smart.search.best_cv.spec == full.search.best_cv.spec
    assert smart.search.best_cv.value == pytest.approx(full.search.best_cv.value, rel=1e-12)
    assert smart.search.scored < full.search.scored
    assert smart.search.strategy.name == "screened"


def test_baselines_are_always_scored():
    prep = _problem(1, p=4)
    out = select(prep, SearchOptions(strategy="screened", **SPACE), "t")
    keys = {
        (s.spec.response_transform.name, tuple(p.transform.name for p in s.spec.predictors))
        for s in out.scored
    }
    for r in ("identity", "log", "sqrt"):
        assert (r, ("identity",) * 4) in keys
        assert (r, ("log",) * 4) in keys


def test_auto_switches_to_screened_past_the_limit_and_honours_max_candidates():
    prep = _problem(2, n=200, p=6)  # 3 x 4^6 = 12288 candidates
    out = run_selection(prep, SearchOptions(max_candidates=40, **SPACE), "t")
    s = out.search
    assert s.considered == 3 * 4**6 > EXHAUSTIVE_LIMIT
    assert s.strategy.name == "screened"
    assert s.scored + s.failed <= 40
    assert s.screened > 0
    assert s.complete is False
    assert any("screened search" in w for w in out.warnings)


def test_many_predictors_within_a_time_limit():
    prep = _problem(3, n=240, p=12)
    out = run_selection(prep, SearchOptions(time_limit_s=20.0, **SPACE), "t")
    s = out.search
    assert s.strategy.name == "screened"
    assert s.elapsed_s < 60.0
    assert out.ranking[0].cv.value > 0


def test_screened_search_in_batches_equals_one_candidate_at_a_time(monkeypatch):
    from service.selection import search as search_mod

    prep = _problem(1, p=4)
    opts = SearchOptions(strategy="screened", **SPACE)
    batched = run_selection(prep, opts, "t")
    monkeypatch.setattr(search_mod._Evaluator, "many", lambda self, specs: [self(s) for s in specs])
    alone = run_selection(prep, opts, "t")
    a, b = batched.search, alone.search
    for key in ("scored", "failed", "screened", "complete"):
        assert getattr(a, key) == getattr(b, key)
    assert [e.equation for e in batched.ranking] == [e.equation for e in alone.ranking]
    for x, y in zip(batched.ranking, alone.ranking, strict=True):
        # source: the same search scoring one candidate at a time
        assert x.cv.value == pytest.approx(y.cv.value, rel=1e-10)
    assert a.best_cv.value == pytest.approx(b.best_cv.value, rel=1e-10)


def test_a_search_whose_time_runs_out_while_screening_still_ranks_its_baselines(monkeypatch):
    from service.selection import strategy as st

    prep = _problem(2, p=4)
    real_init = st.ZScreen.__init__
    late = {"now": False}

    def screen_then_late(self, *a, **k):
        real_init(self, *a, **k)
        late["now"] = True  # the time limit passes as soon as the screening starts

    def in_time(self):
        if late["now"]:
            self.spent = self.spent or "time_limit_s"
            return False
        return True

    monkeypatch.setattr(st.ZScreen, "__init__", screen_then_late)
    monkeypatch.setattr(st.Budget, "in_time", in_time)
    got = run_selection(prep, SearchOptions(strategy="screened", **SPACE), "t")
    # the baselines (every predictor untransformed, every predictor logged, for each of the
    # three response scales) were scored before the screening and are ranked
    assert got.search.scored + got.search.failed == 6
    assert got.ranking and got.search.complete is False
    assert got.search.strategy.stopped_by == "time_limit_s"
    names = {
        (e.specification.response_transform.name, e.specification.predictors[0].transform.name)
        for e in got.ranking
    }
    assert names <= {(r, p) for r in ("identity", "log", "sqrt") for p in ("identity", "log")}


def test_a_budget_stops_its_reserve_before_the_deadline_stretched_by_the_slowdown(monkeypatch):
    from service.selection import strategy as st
    from service.selection.deadline import Deadline

    d = Deadline.after(100.0)
    plain = st.Budget(10, d)
    assert plain.time_left() == pytest.approx(d.left(), abs=0.05) and plain.in_time()
    reserved = st.Budget(10, d, reserve_s=20.0, reserve_cap_s=50.0)
    assert reserved.time_left() == pytest.approx(80.0, abs=0.5)
    monkeypatch.setattr(st.Budget, "slowdown", lambda self: 2.0)
    assert reserved.time_left() == pytest.approx(60.0, abs=0.5)  # 20 s stretched twice
    capped = st.Budget(10, d, reserve_s=40.0, reserve_cap_s=50.0)
    assert capped.time_left() == pytest.approx(50.0, abs=0.5)  # 80 s capped at 50
    late = st.Budget(10, d, reserve_s=120.0)
    assert not late.in_time() and late.spent == "time_limit_s"
    # the listed entries' folds scored again: as long as the slowest candidate so far each
    again = st.Budget(10, d, reserve_s=20.0, reserve_cap_s=50.0, rescored=3)
    again.took(2, 4.0)  # 2 s a candidate
    assert again.time_left() == pytest.approx(100.0 - 2 * 20.0 - 3 * 2.0, abs=0.5)


def test_the_slowdown_is_wall_time_per_cpu_second_of_the_thread_within_bounds():
    import time

    from service.selection import strategy as st
    from service.selection.deadline import Deadline

    b = st.Budget(10, Deadline.after(100.0))
    assert b.slowdown() == 1.0  # within its first second
    b._started = (time.perf_counter() - 10.0, time.thread_time())  # 10 s waited, no CPU
    assert b.slowdown() == st.MAX_SLOWDOWN
    b._started = (time.perf_counter() - 2.0, time.thread_time() - 1.0)
    assert b.slowdown() == pytest.approx(2.0, rel=0.05)


def test_a_batch_holds_what_fits_in_the_time_left_at_the_slowest_rate_seen():
    from service.selection import strategy as st
    from service.selection.deadline import Deadline

    b = st.Budget(100, Deadline.after(10.0))
    assert b.batch(64) == 64  # nothing measured yet
    b.took(4, 2.0)  # 0.5 s a candidate: about 20 fit in the 10 s left
    assert 18 <= b.batch(64) <= 20 and b.batch(8) == 8
    b.took(10, 1.0)  # faster batches do not lower the rate
    assert 18 <= b.batch(64) <= 20
    b.took(1, 30.0)  # slower than the time left: still one at a time, never none
    assert b.batch(64) == 1
    b.took(0, 5.0)  # an empty batch says nothing
    assert b.batch(64) == 1
