"""Benchmark (run by hand): the search with 5, 10, 20 and 30 predictors at 10,000 rows.

Invented water-main data; default options (screened search past 1000 candidates).  Prints the
time, candidates screened and scored, time per candidate scored, and -- where the exhaustive
search is computable (reduced spaces: 5 predictors with 3 response x 3^5 predictor scales =
729 candidates, 10 predictors with 2 x 2^10 = 2048) -- the CV error reached by the screened
search against the exhaustive optimum.

    python tests/benchmarks/predictors.py [--rows 10000] [--counts 5,10,20,30]
"""

from __future__ import annotations

import argparse
import os
import sys

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", ".."))

from tests.benchmarks._common import Timer, machine, pin_blas, water_mains

pin_blas(1)

from service.api.encode import to_jsonable
from service.core.data import prepare
from service.selection.search import run_selection
from service.selection.search_setup import SearchOptions
from tests.typed import predictors, responses

# spaces small enough for the exhaustive search: 3 x 3^5 = 729 and 2 x 2^10 = 2048 candidates
REDUCED = {5: ("identity", "log", "sqrt"), 10: ("identity", "log")}


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--rows", type=int, default=10_000)
    ap.add_argument("--counts", default="5,10,20,30")
    ap.add_argument("--time-limit", type=float, default=300.0)
    args = ap.parse_args()
    print(machine())
    for p in [int(v) for v in args.counts.split(",")]:
        cols = water_mains(args.rows, p, seed=p)
        prep = prepare(
            {"columns": {k: v.tolist() for k, v in cols.items()}},
            "repair_cost",
            [f"x{j}" for j in range(p)],
        )
        with Timer() as t:
            out = to_jsonable(
                run_selection(prep, SearchOptions(time_limit_s=args.time_limit, top=3), "b")
            )
        s = out["search"]
        done = s["candidates_scored"] + s["candidates_failed"]
        print(
            f"{p:>2} predictors: {t.wall:.1f} s wall ({t.cpu:.1f} s CPU), space "
            f"{s['candidates_considered']:.3g}, screened {s['candidates_screened']}, scored "
            f"{s['candidates_scored']} (+{s['candidates_failed']} failed), "
            f"{t.wall / max(done, 1) * 1e3:.1f} ms per candidate scored, stopped by "
            f"{s['strategy']['stopped_by']}; best CV {s['best_cv']['value']:.5g}"
        )
        reduced = REDUCED.get(p)
        if reduced is not None:
            names = reduced
            space = {
                "response_transforms": responses(list(names)),
                "predictor_transforms": predictors(list(names)),
                "top": 1,
                "time_limit_s": args.time_limit,
                "max_candidates": 20_000,
            }
            with Timer() as te:
                full = to_jsonable(
                    run_selection(prep, SearchOptions(strategy="exhaustive", **space), "b")
                )
            with Timer() as tsm:
                smart = to_jsonable(
                    run_selection(prep, SearchOptions(strategy="screened", **space), "b")
                )
            a, b = full["search"]["best_cv"]["value"], smart["search"]["best_cv"]["value"]
            print(
                f"   reduced space of {full['search']['candidates_considered']} "
                f"({'/'.join(names)} for the response and every predictor): exhaustive "
                f"{te.wall:.1f} s ({full['search']['candidates_scored']} scored, complete "
                f"{full['search']['complete']}), best {a:.6g}; screened {tsm.wall:.1f} s "
                f"({smart['search']['candidates_scored']} scored), best {b:.6g}; "
                f"relative gap {b / a - 1:+.2e}"
            )


if __name__ == "__main__":
    main()
