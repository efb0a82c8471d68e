"""How often rank 1 survives dropping one random row (run by hand).

    python tests/benchmarks/stability.py [--drops 40] [--workers 2]

For the shipped demo and for simulated data with a clear scale (the processes of
recovery.py at n = 300), each run drops one row chosen at random (seeded) and repeats the
default selection; the share of runs whose rank 1 has the same scales as on all rows is
printed (target: at least 95%).
"""

from __future__ import annotations

import argparse
import os
import sys
from multiprocessing import get_context
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from recovery import _data
from service.core.data import prepare
from service.demo import demo_columns
from service.selection.search import run_selection
from service.selection.search_setup import SearchOptions

CLEAR = ("log-log power law", "sqrt predictor", "categorical, log response", "mixed")


def _scales(out) -> tuple:
    spec = out.ranking[0].specification
    return (spec.response_transform.name, tuple(p.transform.name for p in spec.predictors))


def demo_prep(drop: int | None = None):
    cols = demo_columns()
    if drop is not None:
        cols = {k: v[:drop] + v[drop + 1 :] for k, v in cols.items()}
    return prepare(
        {"columns": cols},
        "repair_cost",
        ["pipe_length_m", "pipe_age_years", "soil"],
        ["soil"],
    )


def _drop(prep_fn, drop: int) -> tuple:
    return _scales(run_selection(prep_fn(drop), SearchOptions(), "stability"))


def _sim_prep(name: str):
    def make(drop=None):
        prep = _data(name, 300, 0)
        if drop is None:
            return prep
        keep = np.ones(prep.n, bool)
        keep[drop] = False
        cols = {prep.response: prep.y[keep].tolist()}
        cols.update({c: prep.numeric[c][keep].tolist() for c in prep.numeric})
        cols.update({c: prep.categorical[c][keep].tolist() for c in prep.categorical})
        return prepare({"columns": cols}, prep.response, prep.predictors, list(prep.categorical))

    return make


def _task(args):
    which, drop = args
    fn = demo_prep if which == "demo" else _sim_prep(which)
    return which, drop, _drop(fn, drop)


def main(argv=None) -> int:
    ap = argparse.ArgumentParser()
    ap.add_argument("--drops", type=int, default=40)
    ap.add_argument("--workers", type=int, default=1)
    args = ap.parse_args(argv)
    rng = np.random.default_rng(7)
    cases = ["demo", *CLEAR]
    tasks = []
    full = {}
    for which in cases:
        fn = demo_prep if which == "demo" else _sim_prep(which)
        n = fn().n
        full[which] = _scales(run_selection(fn(), SearchOptions(), "stability"))
        tasks += [(which, int(d)) for d in rng.choice(n, args.drops, replace=False)]
    results = []
    if args.workers > 1:
        for var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
            os.environ.setdefault(var, "1")  # one thread per worker on a shared machine
        with get_context("forkserver").Pool(args.workers) as pool:
            for r in pool.imap(_task, tasks, chunksize=1):
                results.append(r)
                print(*r, sep=" | ", file=sys.stderr, flush=True)  # progress
    else:
        for t in tasks:
            results.append(_task(t))
            print(*results[-1], sep=" | ", file=sys.stderr, flush=True)
    for which in cases:
        got = [r[2] for r in results if r[0] == which]
        same = sum(g == full[which] for g in got)
        print(f"{which}: rank 1 {full[which]} kept in {same}/{len(got)} single-row drops")
        for g in {g for g in got if g != full[which]}:
            print(f"    instead: {g}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
