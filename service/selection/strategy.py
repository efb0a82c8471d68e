"""Screened search: how the candidate space is explored when it is too large to score whole.

Exhaustive search scores every candidate (the default while the space holds at
most ``EXHAUSTIVE_LIMIT`` candidates).  Past that, a documented two-stage search
(design choice):

1. **Screen on the model scale.**  For each response scale (an estimated
   Box-Cox / Yeo-Johnson lambda fixed at its all-rows estimate on the
   untransformed predictors, for screening only), coordinate descent over the
   predictor options minimises the K-fold cross-validated squared error on that
   scale, computed from the bank's cross-product matrices in O(K p^3) per
   combination (no pass over the rows).  It starts from all predictors
   untransformed and from all logged, sweeps the predictors in order trying
   every option of one predictor with the others fixed, and stops when a sweep
   changes nothing (at most ``MAX_SWEEPS``).  Comparing predictor scales under
   one response scale is fair on that scale, because the response is the same.
   An estimated power enters the screen at its all-rows estimate for that
   response scale.
2. **Score on the original scale.**  The baselines (every response scale with
   all predictors untransformed and with all logged, which includes the Box-Cox
   response) and each response's ``BEAM`` best screened combinations are
   cross-validated exactly on the original response scale.  Then coordinate
   descent on that exact error starts from the best: each sweep tries every
   option of each predictor (others fixed) and every response scale, moving to
   the lowest error, until a sweep improves nothing.

Every exact scoring counts against ``limits.max_candidates``; both stages stop
at ``limits.time_limit_s``.  The ranking rule (paired one-standard-error band,
simplicity, conditions) is then applied to the scored candidates as in an
exhaustive search.  The search can miss the lowest-error candidate when
predictor scales interact strongly; the response says how many candidates
were screened and scored.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Sequence
from typing import TYPE_CHECKING, Any

import numpy as np

from ..core import boxtidwell as bt
from ..core import transforms as tr
from ..core.fitting import solve_batch
from .candidates import MAX_ESTIMATED_POWERS, Space, allowed, make_spec
from .deadline import Deadline

if TYPE_CHECKING:  # pragma: no cover
    from ..core.data import Prepared
    from ..core.spec import Specification, SpecKey
    from .search_setup import Scored

EXHAUSTIVE_LIMIT = 1000
BEAM = 3
MAX_SWEEPS = 4


STOP_EVERY_S = 0.25


#: the most a busy machine is taken to stretch the work reserved after a search
MAX_SLOWDOWN = 4.0


class Budget:
    """Exact scorings left and the deadline; ``spent`` says why the search stopped.

    ``reserve_s`` is the time the work after the search is estimated to take on a quiet
    machine: the search stops that long before ``deadline``, stretched by the slowdown this
    thread sees (:meth:`slowdown`), so that on a busy machine the work after it still ends
    within the limit; plus, for the ``rescored`` candidates whose folds are scored again
    after the search (the listed entries' CV+ fits), the slowest time a candidate of a
    batch took.  The whole is at most ``reserve_cap_s``.
    """

    def __init__(
        self,
        max_candidates: int,
        deadline: Deadline,
        stop: Callable[[], bool] | None = None,
        reserve_s: float = 0.0,
        reserve_cap_s: float = math.inf,
        rescored: int = 0,
    ):
        self.left = max_candidates
        self.deadline = deadline
        self.spent: str | None = None
        self.stop = stop  # () -> bool: the caller went away (checked at most every STOP_EVERY_S)
        self._next_stop_check = 0.0
        self._per_candidate = 0.0  # the slowest mean seconds a candidate of a batch took
        self.reserve_s = reserve_s
        self.reserve_cap_s = reserve_cap_s
        self.rescored = rescored
        self._started = (time.perf_counter(), time.thread_time())

    def slowdown(self) -> float:
        """Wall-clock seconds per CPU second of this thread since the budget was made (1 to
        :data:`MAX_SLOWDOWN`; 1 in the first second): how much other work on the machine
        stretches this request's."""
        wall = time.perf_counter() - self._started[0]
        cpu = time.thread_time() - self._started[1]
        if wall < 1.0 or cpu <= 0:
            return 1.0
        return min(max(wall / cpu, 1.0), MAX_SLOWDOWN)

    def rescore_seconds(self) -> float:
        """The time kept for the ``rescored`` candidates after the search."""
        return self.rescored * self._per_candidate

    def time_left(self) -> float:
        """Seconds the search may still use (negative once it should stop)."""
        if self.reserve_s <= 0 and self.rescored <= 0:
            return self.deadline.left()
        after = self.reserve_s * self.slowdown() + self.rescore_seconds()
        return self.deadline.left() - min(after, self.reserve_cap_s)

    def batch(self, wanted: int) -> int:
        """How many of ``wanted`` candidates the next batch may score: as many as fit in
        the time left at the slowest rate a batch has shown so far (at least one), so a
        batch started just before the deadline does not run far past it."""
        if self._per_candidate > 0:
            fit = int(max(self.time_left(), 0.0) / self._per_candidate)
            wanted = min(wanted, max(fit, 1))
        return wanted

    def took(self, count: int, seconds: float) -> None:
        """A batch of ``count`` candidates took ``seconds`` (see :meth:`batch`)."""
        if count > 0:
            self._per_candidate = max(self._per_candidate, seconds / count)

    def in_time(self) -> bool:
        """False past the deadline or once ``stop()`` says the caller is gone."""
        if self.time_left() < 0:
            self.spent = self.spent or "time_limit_s"
            return False
        now = time.perf_counter()
        if self.stop is not None and now >= self._next_stop_check:
            self._next_stop_check = now + STOP_EVERY_S
            if self.stop():
                self.spent = self.spent or "client_disconnected"
                return False
        return self.spent != "client_disconnected"

    def ok(self) -> bool:
        if self.left <= 0:
            self.spent = self.spent or "max_candidates"
        else:
            self.in_time()
        return self.spent is None


class ZScreen:
    """K-fold squared error on a fixed model scale z, from the bank's Gram matrices."""

    def __init__(self, space: Space, t: tr.Transform, y: np.ndarray, intercept: bool):
        self.bank = space.bank
        z = t.forward(y)
        self.finite = bool(np.all(np.isfinite(z)))
        if intercept and self.finite:
            z = z - float(np.mean(z))  # same errors, less cancellation in z'z - 2b'c + b'Gb
        self.cf: np.ndarray | None
        self.ctot: np.ndarray | None
        self.cf, self.ctot = self.bank.cross(("screen", t), z) if self.finite else (None, None)
        idx = self.bank.index
        self.zz = (
            np.array(
                [[float(z[rows] @ z[rows]) for rows in idx.test[r]] for r in range(idx.repeats)]
            )
            if self.finite
            else None
        )
        self.count = 0

    def sse(self, cols: list[int]) -> float:
        if not self.finite:
            return np.inf
        assert self.cf is not None and self.ctot is not None and self.zz is not None  # finite
        self.count += 1
        S = np.asarray(cols, dtype=int)
        total = 0.0
        for r in range(self.bank.index.repeats):
            G = self.bank.train_grams(S, r)
            Gk = self.bank.fold_grams(S, r)
            ck = self.cf[r][:, S]
            c = self.ctot[r][S][None, :] - ck
            B, ok = solve_batch(G, c)
            for k in np.flatnonzero(~ok):
                B[k] = np.linalg.lstsq(G[k], c[k], rcond=None)[0]
            sse = self.zz[r] - 2.0 * np.sum(B * ck, axis=1) + np.einsum("kp,kpq,kq->k", B, Gk, B)
            total += float(np.sum(sse))
        return max(total, 0.0) if np.isfinite(total) else np.inf


def _screen_columns(
    space: Space,
    prep: Prepared,
    options: list[list[tr.Transform]],
    choice: Sequence[int],
    t_key: tr.Transform,
) -> list[int] | None:
    cols = list(space.index[("", "intercept")]) if space.intercept else []
    for col, opts, o in zip(prep.predictors, options, choice, strict=True):
        t = opts[o]
        key = ("bt", t_key, col) if bt.is_open(t) else (col, t)
        if key not in space.index:
            return None
        cols.extend(space.index[key])
    return cols


def _descend(
    score: Callable[[tuple[int, ...]], float],
    options: list[list[tr.Transform]],
    starts: list[list[int]],
    keep_going: Callable[[], bool] = lambda: True,
) -> dict[tuple[int, ...], float]:
    """Coordinate descent from each start; returns every evaluated combination's score
    (those evaluated so far once ``keep_going()``, asked before each coordinate, says no)."""
    memo: dict[tuple[int, ...], float] = {}

    def f(choice: Sequence[int]) -> float:
        key = tuple(choice)
        if key not in memo:
            memo[key] = score(key)
        return memo[key]

    for start in starts:
        choice = list(start)
        best = f(choice)
        for _ in range(MAX_SWEEPS):
            changed = False
            for j, opts in enumerate(options):
                if not keep_going():
                    return memo
                for o in range(len(opts)):
                    if o == choice[j]:
                        continue
                    trial = list(choice)
                    trial[j] = o
                    v = f(trial)
                    if v < best * (1.0 - 1e-12):
                        best, choice, changed = v, trial, True
            if not changed:
                break
    return memo


def _start(options: list[list[tr.Transform]], name: str) -> list[int]:
    out: list[int] = []
    for opts in options:
        idx = next((i for i, t in enumerate(opts) if t.name == name), None)
        if idx is None:
            idx = next((i for i, t in enumerate(opts) if t.name in ("identity", "categorical")), 0)
        out.append(idx)
    return out


def screened_search(
    prep: Prepared,
    resp: list[tr.Transform],
    options: list[list[tr.Transform]],
    space: Space,
    evaluate: Callable[[Specification], Scored | None],
    budget: Budget,
    screen_scales: dict[tr.Transform, tr.Transform],
    intercept: bool,
    evaluate_many: Callable[[list[Specification]], list[Scored | None]] | None = None,
    batch: int = 1,
) -> dict[str, Any]:
    """Run both stages; ``evaluate(spec)`` scores exactly (returns Scored or None on failure);
    ``evaluate_many(specs)``, when given, scores a list the same way in one call (the
    baselines, the screen's best and each predictor's alternatives in the descent), at most
    ``batch`` at a time with the budget asked between two calls.

    ``screen_scales`` maps each response transform to the fixed transform used
    in the screen.  Returns counts for the response's ``search`` block.
    """
    screened = 0
    queue: list[Specification] = []
    for t in resp:
        base = [_start(options, "identity"), _start(options, "log")]
        queue += [
            make_spec(prep, t, [options[j][o] for j, o in enumerate(c)], intercept) for c in base
        ]
    scored: dict[SpecKey, Scored | None] = {}

    def run(spec: Specification) -> Scored | None:
        if spec.key in scored or not allowed(spec):
            return scored.get(spec.key)
        if not budget.ok():
            return None
        budget.left -= 1
        scored[spec.key] = evaluate(spec)
        return scored[spec.key]

    def run_all(specs: list[Specification]) -> None:
        """``run`` for each of ``specs`` in order, in one call of ``evaluate_many``."""
        if evaluate_many is None:
            for spec in specs:
                run(spec)
            return
        todo: list[Specification] = []
        for spec in specs:
            if spec.key not in scored and allowed(spec) and all(s.key != spec.key for s in todo):
                todo.append(spec)
        start = 0
        while start < len(todo):
            if not budget.ok():
                return
            part = todo[start : start + budget.batch(max(batch, 1))]
            start += len(part)
            cut = len(part) > budget.left
            part = part[: max(budget.left, 0)]
            budget.left -= len(part)
            t0 = time.perf_counter()
            results = evaluate_many(part)
            budget.took(len(part), time.perf_counter() - t0)
            for spec, res in zip(part, results, strict=True):
                scored[spec.key] = res
            if cut:
                budget.ok()  # says why the rest were not scored, as one at a time would
                return

    # the baselines first: a search whose time runs out while screening still ranks them
    run_all(list(queue))
    for t in resp:
        if not budget.ok():
            break
        ts = screen_scales.get(t)
        if ts is None:
            continue
        screen = ZScreen(space, ts, prep.y, intercept)
        t_key = ts
        opts_t = (
            options
            if not t.needs_lambda
            else [[u for u in o if not bt.is_open(u)] for o in options]
        )

        def score(
            choice: tuple[int, ...],
            opts_t: list[list[tr.Transform]] = opts_t,
            screen: ZScreen = screen,
            t_key: tr.Transform = t_key,
        ) -> float:
            n_open = sum(1 for o, c in zip(opts_t, choice, strict=True) if bt.is_open(o[c]))
            if n_open > MAX_ESTIMATED_POWERS:
                return np.inf
            cols = _screen_columns(space, prep, opts_t, choice, t_key)
            return np.inf if cols is None else screen.sse(cols)

        memo = _descend(
            score, opts_t, [_start(opts_t, "identity"), _start(opts_t, "log")], budget.in_time
        )
        screened += screen.count
        best = sorted((v, c) for c, v in memo.items() if np.isfinite(v))[:BEAM]
        queue += [
            make_spec(prep, t, [opts_t[j][o] for j, o in enumerate(c)], intercept) for _, c in best
        ]
    run_all(queue)
    # exact coordinate descent from the lowest error found
    current = _best(scored)
    for _ in range(MAX_SWEEPS):
        if current is None or not budget.ok():
            break
        open_spec = current[0]
        improved = False
        for j, opts in enumerate(options):
            alternatives = []
            for t in opts:
                preds = [p.transform for p in open_spec.predictors]
                if preds[j] == t:
                    continue
                preds[j] = t
                alternatives.append(make_spec(prep, open_spec.response_transform, preds, intercept))
            run_all(alternatives)
            new = _best(scored)
            if new is not None and new[1].cv.value < current[1].cv.value:
                current, open_spec, improved = new, new[0], True
        run_all(
            [
                make_spec(prep, t, [p.transform for p in open_spec.predictors], intercept)
                for t in resp
            ]
        )
        new = _best(scored)
        if new is not None and new[1].cv.value < current[1].cv.value:
            current, improved = new, True
        if not improved:
            break
    return {"screened": screened, "exact": len(scored)}


def _best(scored: dict[SpecKey, Scored | None]) -> tuple[Specification, Scored] | None:
    """(open specification, Scored) with the lowest CV error, or None."""
    best = None
    for s in scored.values():
        if s is None:
            continue
        assert s.open_spec is not None  # set by Scored.__post_init__
        if best is None or s.cv.value < best[1].cv.value:
            best = (s.open_spec, s)
    return best
