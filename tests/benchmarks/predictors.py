"""Benchmark (run by hand): the search with 5, 10, 20 and 30 predictors at 10,000 rows.

Invented water-main data; default options (screened search past 1000 candidates).  Prints the
time, candidates screened and scored, time per candidate scored, and whether the answer came
within the time limit.

``--gap 8,10,12``: the gap to the exhaustive optimum where the exhaustive search is
computable, on a fixed-scale space (identity / log / sqrt for the response, identity / log
for every predictor: 3 x 2^p candidates, 768 to 12,288): the exhaustive search's best CV
error, the screened search's best on the same space, and the relative gap.

``--compare``: the default search with the work after the search handled as before, patched
back in the same run (no time reserved for the band members' entries, White's test in every
member's conditions, batches not cut to the time left, every leading member assessed
whatever the time), against the search as shipped; alternating, ``--runs`` each.  The
answer's time against the limit is the number to read.

    python tests/benchmarks/predictors.py [--rows 10000] [--counts 5,10,20,30]
        [--time-limit 300] [--gap 8,10,12] [--compare --counts 30 --time-limit 60]
"""

from __future__ import annotations

import argparse
import contextlib
import os
import sys

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", ".."))

from tests.benchmarks._common import Timer, machine, pin_blas, water_mains

pin_blas(1)

from service.api.encode import to_jsonable
from service.core.data import prepare
from service.selection import search as search_mod
from service.selection import strategy as strategy_mod
from service.selection.search import run_selection
from service.selection.search_setup import SearchOptions
from tests.typed import predictors, responses

#: the fixed-scale space of the gap measurement
GAP_RESPONSES = ("identity", "log", "sqrt")
GAP_PREDICTORS = ("identity", "log")


def _prep(rows: int, p: int):
    cols = water_mains(rows, p, seed=p)
    return prepare(
        {"columns": {k: v.tolist() for k, v in cols.items()}},
        "repair_cost",
        [f"x{j}" for j in range(p)],
    )


@contextlib.contextmanager
def before():
    """The work after the search as it was handled before: patched back for the block."""
    real_entry = search_mod.entry_for
    real_order = search_mod._order_by_conditions
    saved = (
        search_mod.listing_seconds,
        search_mod.entry_for,
        search_mod._order_by_conditions,
        strategy_mod.Budget.batch,
        strategy_mod.Budget.rescore_seconds,
    )

    def entry_with_white(*a, **k):
        k["white"] = True  # every member's conditions with White's test, as before
        return real_entry(*a, **k)

    def order_whatever_the_time(ranked, full, opts, warnings, *_):
        return real_order(ranked, full, opts, warnings, None)

    search_mod.listing_seconds = lambda *a: 0.0
    search_mod.entry_for = entry_with_white
    search_mod._order_by_conditions = order_whatever_the_time
    strategy_mod.Budget.batch = lambda self, wanted: wanted
    strategy_mod.Budget.rescore_seconds = lambda self: 0.0
    try:
        yield
    finally:
        (
            search_mod.listing_seconds,
            search_mod.entry_for,
            search_mod._order_by_conditions,
            strategy_mod.Budget.batch,
            strategy_mod.Budget.rescore_seconds,
        ) = saved


def one(prep, limit: float, label: str) -> None:
    with Timer() as t:
        out = to_jsonable(run_selection(prep, SearchOptions(time_limit_s=limit, top=3), "b"))
    s = out["search"]
    done = s["candidates_scored"] + s["candidates_failed"]
    band = s["band"]["conditions"]["members_compared"]
    print(
        f"{label}{len(prep.predictors):>2} predictors: {t.wall:.1f} s wall ({t.cpu:.1f} s CPU) "
        f"with a limit of {limit:g} s ({t.wall / limit:.2f} of it), space "
        f"{s['candidates_considered']:.3g}, screened {s['candidates_screened']}, scored "
        f"{s['candidates_scored']} (+{s['candidates_failed']} failed), "
        f"{t.wall / max(done, 1) * 1e3:.1f} ms per candidate scored, stopped by "
        f"{s['strategy']['stopped_by']}, {band} band members compared; "
        f"best CV {s['best_cv']['value']:.5g}"
    )


def gap(prep, limit: float) -> None:
    space = {
        "response_transforms": responses(list(GAP_RESPONSES)),
        "predictor_transforms": predictors(list(GAP_PREDICTORS)),
        "top": 1,
        "time_limit_s": limit,
        "max_candidates": 20_000,
    }
    with Timer() as te:
        full = to_jsonable(run_selection(prep, SearchOptions(strategy="exhaustive", **space), "b"))
    with Timer() as tsm:
        smart = to_jsonable(run_selection(prep, SearchOptions(strategy="screened", **space), "b"))
    a, b = full["search"]["best_cv"]["value"], smart["search"]["best_cv"]["value"]
    print(
        f"{len(prep.predictors):>2} predictors, space of {full['search']['candidates_considered']} "
        f"({'/'.join(GAP_RESPONSES)} for the response, {'/'.join(GAP_PREDICTORS)} for every "
        f"predictor): exhaustive {te.wall:.1f} s ({te.cpu:.1f} s CPU, "
        f"{full['search']['candidates_scored']} scored, complete {full['search']['complete']}), "
        f"best {a:.8g}; screened {tsm.wall:.1f} s ({tsm.cpu:.1f} s CPU, "
        f"{smart['search']['candidates_scored']} scored), best {b:.8g}; "
        f"relative gap {b / a - 1:+.2e}"
    )


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--rows", type=int, default=10_000)
    ap.add_argument("--counts", default="5,10,20,30")
    ap.add_argument("--time-limit", type=float, default=300.0)
    ap.add_argument("--gap", default="", help="predictor counts for the exhaustive gap")
    ap.add_argument("--compare", action="store_true")
    ap.add_argument("--runs", type=int, default=1)
    args = ap.parse_args()
    print(machine())
    if args.gap:
        for p in [int(v) for v in args.gap.split(",")]:
            gap(_prep(args.rows, p), max(args.time_limit, 600.0))
        return
    for p in [int(v) for v in args.counts.split(",")]:
        prep = _prep(args.rows, p)
        if not args.compare:
            one(prep, args.time_limit, "")
            continue
        for _ in range(args.runs):
            with before():
                one(prep, args.time_limit, "before:   ")
            one(prep, args.time_limit, "as shipped: ")


if __name__ == "__main__":
    main()
