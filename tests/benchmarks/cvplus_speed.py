"""CV+ order statistics for many new rows: the rows x residuals matrix (before) against the
bisection paths (after), in the same run (run by hand; a few minutes, most of it the matrix).

    python tests/benchmarks/cvplus_speed.py [--rows 100000] [--train 2000] [--folds 5]

A model is fitted through the diagnostics core on invented water-main repair costs
(``train`` rows, so the artifact keeps every out-of-fold residual up to 2,000), its artifact
loaded back, and CV+ limits computed for ``rows`` new rows by ``cvplus.intervals`` with
``fast=False`` (every candidate formed in chunks of 4 million and partitioned) and with the
default fast path.  Cases: a Box-Cox response whose lambda is estimated inside every fold
(each fold its own scale: the mapped bisection) and a log response (one scale shared by
every fold: the model-scale bisection).  Both paths must agree (relative 1e-12); the ratio
is before / after on the same machine in the same run.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from _common import Timer, machine, pin_blas, water_mains
from service.api.artifact import load_model
from service.api.encode import to_jsonable
from service.core import cvplus
from service.core.data import prepare
from service.core.predict import new_design
from service.selection.diagnose import diagnose_specification
from service.selection.search_setup import SearchOptions
from tests.typed import sent

PREDICTORS = ["x0", "x1", "x2"]


def model_for(response: dict, n: int, folds: int):
    cols = water_mains(n, 3, seed=1)
    prep = prepare({"columns": {k: v.tolist() for k, v in cols.items()}}, "repair_cost", PREDICTORS)
    spec = {
        "response": {"column": "repair_cost", "transform": response},
        "predictors": [{"column": c, "transform": {"name": "log"}} for c in PREDICTORS],
    }
    opts = SearchOptions(folds=folds)
    entry, _ = diagnose_specification(prep, sent(spec), opts, "bench", max_points=10)
    return load_model(to_jsonable(entry.model))  # the artifact as issued, read back


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--rows", type=int, default=100_000, help="new rows to predict")
    ap.add_argument("--train", type=int, default=2000, help="training rows (stored residuals)")
    ap.add_argument("--folds", type=int, default=5)
    ap.add_argument("--level", type=float, default=0.9)
    a = ap.parse_args()
    pin_blas(1)
    print(machine())
    new = water_mains(a.rows, 3, seed=2)
    data = {"columns": {c: new[c].tolist() for c in PREDICTORS}}
    print(
        f"{a.rows:,} new rows x {min(a.train, cvplus.MAX_ROWS):,} stored residuals, "
        f"{a.folds} folds, level {a.level}"
    )
    print(
        "| response scale | path after | before: matrix (s) | after (s) | ratio | max rel. diff |"
    )
    print("|---|---|---|---|---|---|")
    for label, resp, path in (
        ("Box-Cox, lambda per fold", {"name": "box_cox"}, "mapped bisection"),
        ("log, one scale", {"name": "log"}, "model-scale bisection"),
    ):
        model = model_for(resp, a.train, a.folds)
        cvp = model.cv_plus
        assert cvp is not None, "the model stores CV+ fits"
        X, _, _ = new_design(model, data)
        args = (
            cvp.coefficients,
            cvp.transforms,
            cvp.fold,
            cvp.abs_resid,
            X,
            a.level,
            model.response_transform,
        )
        with Timer() as before:
            full = cvplus.intervals(*args, fast=False)
        with Timer() as after:
            fast = cvplus.intervals(*args)
        worst = 0.0
        for got, want in zip(fast, full, strict=True):
            ok = np.isfinite(want)
            assert np.array_equal(ok, np.isfinite(got)), "both paths give the same null ends"
            if ok.any():
                worst = max(worst, float(np.max(np.abs(got[ok] - want[ok]) / np.abs(want[ok]))))
        assert worst <= 1e-12, worst
        print(
            f"| {label} | {path} | {before.wall:.1f} | {after.wall:.2f} | "
            f"{before.wall / after.wall:.1f}x | {worst:.1e} |"
        )


if __name__ == "__main__":
    main()
