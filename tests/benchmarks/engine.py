"""Benchmark (run by hand): the batched engine against the paths it replaced, "before" and
"after" alternating in the same run.

"before" puts back, by patching, what the engine did before:

- the condition check of stacked Gram matrices by their eigenvalues (``numpy.linalg.eigvalsh``
  for every matrix) and the triangular solves by one LAPACK ``gesv`` per matrix
  (``fitting._checked_factors``; ``fitting._tri_inverse`` replaced by ``gesv`` against the
  identity, so the solutions go through one LAPACK solve per matrix and factor);
- power-form smeared means one group per call (``retransform.smeared_means`` calling
  ``smeared_mean`` per group; batchcv calls it with every candidate of a fold);
- candidates with per-fold lambdas or powers scored one at a time (``Scorer.score_many``
  calling ``Scorer.score`` per candidate).

Two changes are in both columns (not patched back): each estimated-power candidate's folds'
designs formed together, and the specification's simplicity kept per transform key.

Parts timed: a stack of 550 7 x 7 systems (the Box-Tidwell trial's size on the demo),
the demo's default selection in process (``service/demo``, as every exit makes it:
``run_selection`` then ``to_jsonable``), ``/v1/reports`` on the demo (TestClient), and the
practitioner grid of ``tests/benchmarks/naive_loop.py`` (3,000 rows, 4 response x 125
predictor scales, 5 folds) answered in process.  Prints best-of-``--runs`` CPU seconds
(``time.process_time``) beside wall seconds (the machine is shared), the ratio, and the
largest relative change of any number in the selection bodies (checksums aside: they follow
the numbers' last bits).

    python tests/benchmarks/engine.py [--runs 3] [--skip-grid] [--skip-report]
"""

from __future__ import annotations

import argparse
import math
import os
import sys
from contextlib import contextmanager

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", ".."))

from tests.benchmarks._common import Timer, machine, pin_blas, water_mains

pin_blas(1)

import numpy as np
from service.api.encode import to_jsonable
from service.api.options import selection_job, service
from service.api.schemas import SelectionRequest
from service.core import fastcv, fitting, retransform
from service.core.errors import CandidateFailure
from service.demo import demo_request
from service.selection.request import run_selection


def _lapack_inverse(L):
    return np.linalg.solve(L, np.broadcast_to(np.eye(L.shape[1]), L.shape))


def _means_one_group_at_a_time(ts, eta, e):
    return np.stack([retransform.smeared_mean(t, eta[g], e[g]) for g, t in enumerate(ts)])


def _score_one_at_a_time(self, items):
    out = []
    for t, cols, names, dyn, found in items:
        try:
            out.append(self.score(t, cols, names, dyn, found=found))
        except CandidateFailure as exc:
            out.append(exc)
    return out


@contextmanager
def before():
    saved = (
        fitting._checked_factors,
        fitting._tri_inverse,
        retransform.smeared_means,
        fastcv.Scorer.score_many,
    )
    fitting._checked_factors = lambda Gs, limit: None
    fitting._tri_inverse = _lapack_inverse
    retransform.smeared_means = _means_one_group_at_a_time
    fastcv.Scorer.score_many = _score_one_at_a_time
    try:
        yield
    finally:
        (
            fitting._checked_factors,
            fitting._tri_inverse,
            retransform.smeared_means,
            fastcv.Scorer.score_many,
        ) = saved


def largest_change(a, b, path=""):
    """Largest relative difference between two JSON bodies' numbers (checksums and elapsed
    times aside); inf where their shapes differ."""
    if isinstance(a, dict) and isinstance(b, dict):
        if a.keys() != b.keys():
            return math.inf
        return max(
            (
                largest_change(a[k], b[k], f"{path}/{k}")
                for k in a
                if k not in ("checksum", "elapsed_s", "signature")
            ),
            default=0.0,
        )
    if isinstance(a, list) and isinstance(b, list):
        if len(a) != len(b):
            return math.inf
        return max((largest_change(x, y, path) for x, y in zip(a, b, strict=True)), default=0.0)
    if isinstance(a, float) and isinstance(b, float):
        if a == b:
            return 0.0
        return abs(a - b) / max(abs(a), abs(b), 1e-300)
    return 0.0 if a == b else math.inf


def timed(fn, runs):
    best = (math.inf, math.inf)
    out = None
    for _ in range(runs):
        with Timer() as t:
            out = fn()
        best = min(best, (t.cpu, t.wall))
    return best, out


def compare(label, fn, runs, earlier=None):
    """``fn`` with the earlier paths (``earlier()``, a context manager; this module's
    :func:`before` unless given) and as shipped, alternating, best of ``runs`` each."""
    earlier = earlier or before
    with earlier():
        fn()  # warm: imports, caches
    fn()
    rounds = []
    for _ in range(runs):  # alternate, so both columns see the same load
        with earlier():
            b, body_b = timed(fn, 1)
        a, body_a = timed(fn, 1)
        rounds.append((b, a))
    b = min(r[0] for r in rounds)
    a = min(r[1] for r in rounds)
    if isinstance(body_a, dict):
        change = largest_change(body_b, body_a)
    elif isinstance(body_a, np.ndarray):  # values of many candidates, NaN where one failed
        ok = np.isfinite(body_a) & np.isfinite(body_b)
        change = float(np.max(np.abs(body_a[ok] / body_b[ok] - 1), initial=0.0))
    else:
        change = float("nan")
    print(
        f"{label}: before cpu {b[0]:.3f} s (wall {b[1]:.3f}), after cpu {a[0]:.3f} s "
        f"(wall {a[1]:.3f}); ratio {b[0] / a[0]:.2f}x CPU; largest relative change {change:.1e}"
    )


def demo():
    job = selection_job(SelectionRequest.model_validate(demo_request()))
    return to_jsonable(run_selection(job, service()))


def grid_body():
    cols = water_mains(3000, 3, seed=0)
    return {
        "data": {"columns": {k: v.tolist() for k, v in cols.items()}},
        "response": "repair_cost",
        "predictors": ["x0", "x1", "x2"],
        "transforms": {
            "response": ["identity", "log", "sqrt", "reciprocal"],
            "predictors": ["identity", "log", "sqrt", "reciprocal", "square"],
        },
        "validation": {"folds": 5, "seed": 0},
    }


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--runs", type=int, default=3)
    ap.add_argument("--skip-grid", action="store_true")
    ap.add_argument("--skip-report", action="store_true")
    args = ap.parse_args()
    print(machine())
    rng = np.random.default_rng(0)
    A = rng.normal(size=(550, 50, 7))
    G, c = A.transpose(0, 2, 1) @ A, rng.normal(size=(550, 7))

    def stack():
        for _ in range(20):
            fitting.solve_batch_nested(G, c, 5)

    compare("550 systems of 7 x 7 (solve_batch_nested, 20 times)", stack, args.runs)
    compare("demo default selection, in process", demo, args.runs)
    if not args.skip_report:
        from fastapi.testclient import TestClient
        from service.app import app

        with TestClient(app) as client:

            def report():
                r = client.post("/v1/reports", json=demo_request())
                assert r.status_code == 200, r.text
                return None

            compare("/v1/reports on the demo (TestClient)", report, args.runs)
    if not args.skip_grid:
        body = grid_body()

        def grid():
            job = selection_job(SelectionRequest.model_validate(body))
            return to_jsonable(run_selection(job, service()))

        compare("practitioner grid (500 candidates, 3,000 rows), in process", grid, args.runs)


if __name__ == "__main__":
    main()
