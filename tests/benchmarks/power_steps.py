"""Benchmark (run by hand): the Box-Tidwell power steps and the stacked solves they call, an
earlier revision of ``service`` against the working tree, alternating in the same run.

The earlier revision (``--before``, a git revision; default 29c3e3b, the engine before the
power steps formed their columns on training rows only; 71c0cd9: before the steps
extrapolated from the last two iterates and the trials' cross-products by einsum) is exported with ``git archive`` into
a temporary directory; every part runs in a fresh process for each side, the sides
alternating ``--runs`` times, and the best CPU seconds (``time.process_time``; the machine is
shared) are compared.  Parts:

- ``demo folds`` / ``demo all rows``: the demo selection's (``service/demo``, default
  options) calls of ``estimate_many_fold_powers`` and ``estimate_many_powers``, recorded in
  that process and replayed;
- ``demo selection``: the demo's default selection in process, end to end;
- ``100k all rows``: ``estimate_many_powers`` of 4 invented candidates x 100,000 rows (one and
  two powers beside an intercept and four fixed columns);
- ``solves K``: ``fitting.solve_batch_nested`` of K 6 x 6 systems (K = 1, 5, 50, 550), 50 times.

Prints each part's CPU (and wall) seconds per side, the ratio, the largest |power
difference| between the sides (the demo's and the 100k candidates' powers) and, for the
power parts, the iterations all their fits took on each side.

    python tests/benchmarks/power_steps.py [--before REV] [--runs 3] [--skip-100k]
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys
import tempfile

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.abspath(os.path.join(HERE, "..", ".."))


def _timed(fn, repeat: int = 3):
    import time

    fn()  # warm
    best = (float("inf"), float("inf"))
    out = None
    for _ in range(repeat):
        c0, w0 = time.process_time(), time.perf_counter()
        out = fn()
        best = min(best, (time.process_time() - c0, time.perf_counter() - w0))
    return best, out


def _iterations(results) -> int:
    out = 0
    for r in results:
        if isinstance(r, list):
            out += sum(int(f.iterations) for f in r)
        elif hasattr(r, "iterations"):
            out += int(r.iterations)
    return out


def _powers(results) -> list[float]:
    out: list[float] = []
    for r in results:
        if isinstance(r, list):
            out.extend(float(v) for f in r for v in f.powers)
        elif hasattr(r, "powers"):
            out.extend(float(v) for v in r.powers)
    return out


def worker(part: str) -> dict:
    sys.path.insert(0, HERE)
    from _common import pin_blas

    pin_blas(1)
    import numpy as np
    from service.core import boxtidwell as bt

    if part.startswith("solves"):
        from service.core import fitting

        K = int(part.split()[1])
        rng = np.random.default_rng(0)
        X = rng.normal(size=(K, 40, 6))
        G, c = np.swapaxes(X, 1, 2) @ X, rng.normal(size=(K, 6))
        (cpu, wall), _ = _timed(lambda: [fitting.solve_batch_nested(G, c, 5) for _ in range(50)])
        return {"cpu": cpu, "wall": wall, "powers": []}
    if part == "100k all rows":
        rng = np.random.default_rng(0)
        n = 100_000
        problems = []
        for c in range(4):
            x = rng.uniform(0.5, 60.0, (n, 1 + c % 2))
            w = rng.normal(size=(n, 4))
            z = 1.0 + 0.8 * np.log(x[:, 0]) + w @ [0.3, 0.1, -0.2, 0.05] + rng.normal(0, 0.3, n)
            problems.append((z, np.column_stack([np.ones(n), w]), x))
        (cpu, wall), got = _timed(lambda: bt.estimate_many_powers(problems), 2)
        return {"cpu": cpu, "wall": wall, "powers": _powers(got), "iterations": _iterations(got)}
    from service.api.options import selection_job, service
    from service.api.schemas import SelectionRequest
    from service.core import fastcv
    from service.demo import demo_request
    from service.selection.request import run_selection

    def demo():
        job = selection_job(SelectionRequest.model_validate(demo_request()))
        return run_selection(job, service())

    if part == "demo selection":
        (cpu, wall), _ = _timed(demo)
        return {"cpu": cpu, "wall": wall, "powers": []}
    calls = []
    many_folds, many_rows = bt.estimate_many_fold_powers, bt.estimate_many_powers

    def spy_folds(problems, boxcox_form=True):
        calls.append(("folds", problems, boxcox_form))
        return many_folds(problems, boxcox_form)

    def spy_rows(problems, boxcox_form=True):
        calls.append(("rows", problems, boxcox_form))
        return many_rows(problems, boxcox_form)

    fastcv.estimate_many_fold_powers, bt.estimate_many_powers = spy_folds, spy_rows
    demo()
    fastcv.estimate_many_fold_powers, bt.estimate_many_powers = many_folds, many_rows
    kind = "folds" if part == "demo folds" else "rows"
    fn = many_folds if kind == "folds" else many_rows
    mine = [(p, form) for k, p, form in calls if k == kind]
    (cpu, wall), got = _timed(lambda: [r for p, form in mine for r in fn(p, form)], 5)
    return {"cpu": cpu, "wall": wall, "powers": _powers(got), "iterations": _iterations(got)}


def run(side: str, path: str, part: str) -> dict:
    env = dict(os.environ, PYTHONPATH=path)
    p = subprocess.run(
        [sys.executable, __file__, "--worker", part],
        cwd=path,
        env=env,
        capture_output=True,
        text=True,
        check=True,
    )
    out = json.loads(p.stdout.strip().splitlines()[-1])
    assert out["source"].startswith(os.path.realpath(path)), (side, out["source"], path)
    return out


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--before", default="29c3e3b")
    ap.add_argument("--runs", type=int, default=3)
    ap.add_argument("--skip-100k", action="store_true")
    ap.add_argument("--worker", default=None, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.worker is not None:
        import service

        out = worker(args.worker)
        out["source"] = os.path.realpath(service.__file__)  # which revision answered
        print(json.dumps(out))
        return
    sys.path.insert(0, HERE)
    from _common import machine

    print(machine())
    parts = ["solves 1", "solves 5", "solves 50", "solves 550", "demo folds", "demo all rows"]
    parts += ["demo selection"] + ([] if args.skip_100k else ["100k all rows"])
    with tempfile.TemporaryDirectory() as old:
        archive = subprocess.run(
            ["git", "-C", ROOT, "archive", args.before, "service"],
            capture_output=True,
            check=True,
        ).stdout
        subprocess.run(["tar", "-x", "-C", old], input=archive, check=True)
        for part in parts:
            best = {"before": None, "after": None}
            for _ in range(args.runs):
                for side, path in (("before", old), ("after", ROOT)):
                    r = run(side, path, part)
                    if best[side] is None or r["cpu"] < best[side]["cpu"]:
                        best[side] = r
            b, a = best["before"], best["after"]
            diff = max(
                (abs(u - v) for u, v in zip(b["powers"], a["powers"], strict=True)), default=0.0
            )
            print(
                f"{part:>15}: before cpu {b['cpu']:.3f} s (wall {b['wall']:.3f}), after cpu "
                f"{a['cpu']:.3f} s (wall {a['wall']:.3f}); ratio {b['cpu'] / a['cpu']:.2f}x CPU; "
                f"largest |power difference| {diff:.1e}"
                + (
                    f"; iterations {b['iterations']} -> {a['iterations']}"
                    if "iterations" in b and "iterations" in a
                    else ""
                )
            )


if __name__ == "__main__":
    main()
