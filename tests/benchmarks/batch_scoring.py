"""Benchmark (run by hand): candidates scored one at a time (``Scorer.score``) against one
batch per response scale (``batchcv.score_many``), same bank, same folds, same run.

The grid of the practitioner-loop benchmark: 3,000 rows of invented water-main repair
costs, 3 positive predictors, responses identity / log / sqrt / reciprocal x 5^3 predictor
scales (identity, log, sqrt, reciprocal, square) = 500 candidates, 5-fold CV.  Prints CPU
and wall seconds of both ways, the ratio, and the largest relative difference of the CV
errors (the batch must equal the one-at-a-time path).

    python tests/benchmarks/batch_scoring.py [--rows 3000] [--repeats 1] [--folds 5]
"""

from __future__ import annotations

import argparse
import itertools
import os
import sys

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", ".."))

from tests.benchmarks._common import Timer, machine, pin_blas, water_mains

pin_blas(1)

import numpy as np
from service.core import transforms as tr
from service.core.bank import ColumnBank, FoldIndex
from service.core.batchcv import score_many
from service.core.errors import CandidateFailure
from service.core.fastcv import Scorer
from service.core.folds import make_plan

PRED = ["identity", "log", "sqrt", "reciprocal", "square"]
RESP = ["identity", "log", "sqrt", "reciprocal"]


def grid_scorer(rows: int, folds: int = 5, repeats: int = 1):
    """The practitioner grid's set-up: 3 predictors of invented water-main data, their 5
    scales in one column bank, the 125 predictor sets and a scorer over ``folds`` x
    ``repeats`` splits."""
    cols = water_mains(rows, 3, seed=0)
    y = cols["repair_cost"]
    plan = make_plan(y.size, folds, repeats, 0)
    bank = ColumnBank(y.size, FoldIndex.of(plan, y.size))
    bank.add("one", np.ones(y.size))
    for j in range(3):
        for name in PRED:
            bank.add((j, name), tr.Transform(name).forward(cols[f"x{j}"]))
    bank.freeze()
    sets = [
        [0, *(bank.keys[(j, name)] for j, name in enumerate(combo))]
        for combo in itertools.product(PRED, repeat=3)
    ]
    return plan, sets, Scorer(bank, y, plan, False)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--rows", type=int, default=3000)
    ap.add_argument("--folds", type=int, default=5)
    ap.add_argument("--repeats", type=int, default=1)
    args = ap.parse_args()
    print(machine())
    plan, sets, scorer = grid_scorer(args.rows, args.folds, args.repeats)
    for name in RESP:  # the response scales once (cached by both ways)
        scorer.fixed_response(tr.Transform(name))
    one: list[float] = []
    with Timer() as t_one:
        for name in RESP:
            t = tr.Transform(name)
            for s in sets:
                try:
                    one.append(scorer.score(t, s).value)
                except CandidateFailure:
                    one.append(float("nan"))
    many: list[float] = []
    with Timer() as t_many:
        for name in RESP:
            got = score_many(scorer, tr.Transform(name), sets, [None] * len(sets))
            many += [g.value if not isinstance(g, CandidateFailure) else float("nan") for g in got]
    a, b = np.array(one), np.array(many)
    same_failures = bool(np.array_equal(np.isnan(a), np.isnan(b)))
    ok = ~np.isnan(a)
    diff = float(np.max(np.abs(b[ok] / a[ok] - 1))) if ok.any() else 0.0
    n = len(a)
    print(f"{n} candidates ({int(ok.sum())} scored), {args.rows} rows, {plan.n_splits} splits")
    print(f"one at a time : {t_one.cpu:7.3f} s CPU  {t_one.wall:7.3f} s wall")
    print(f"batched       : {t_many.cpu:7.3f} s CPU  {t_many.wall:7.3f} s wall")
    print(
        f"ratio         : {t_one.cpu / t_many.cpu:7.2f}x CPU  {t_one.wall / t_many.wall:7.2f}x wall"
    )
    print(f"same failures : {same_failures}; largest relative CV difference {diff:.2e}")


if __name__ == "__main__":
    main()
