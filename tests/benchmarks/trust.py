"""Benchmark: cost of the trust assessment (stability, optimism) against the search itself.

Run by hand from the repository root (never in CI):

    python tests/benchmarks/trust.py [--rows 3000] [--resamples 20] [--processes 1]

Invented data: the shipped demo scenario (water-main repair costs) at ``rows`` rows.  The
baseline is ``select`` with the service's default options, measured in the same
invocation; stability and optimism are timed separately with their defaults and printed
as multiples of it.  With ``--processes 2`` the resamples and outer folds also run on a
process pool (``workers.process_mapper``) and the results are checked to be identical.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import time
from dataclasses import replace

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", ".."))

from service.api.encode import to_jsonable
from service.core.data import prepare
from service.demo import demo_columns
from service.selection.search import select
from service.selection.search_setup import SearchOptions
from service.selection.trust import assess_trust
from service.selection.workers import process_mapper
from threadpoolctl import threadpool_limits


def _timed(fn):
    t = time.perf_counter()
    out = fn()
    return out, time.perf_counter() - t


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=3000)
    ap.add_argument("--resamples", type=int, default=None)
    ap.add_argument("--processes", type=int, default=1)
    args = ap.parse_args()
    threadpool_limits(limits=1)

    prep = prepare(
        {"columns": demo_columns(args.rows)},
        "repair_cost",
        ["pipe_length_m", "pipe_age_years", "soil"],
    )
    opts = SearchOptions(time_limit_s=600.0)
    result, t_search = _timed(lambda: select(prep, opts, "bench"))
    winner = result.winner.spec

    def trust(stability, optimism, mapper=map, chunks=1):
        return assess_trust(
            prep,
            opts,
            winner,
            "bench",
            stability,
            optimism,
            args.resamples,
            selection=result,
            mapper=mapper,
            chunks=chunks,
        )

    st, t_st = _timed(lambda: trust(True, False))
    op, t_op = _timed(lambda: trust(False, True))
    det = st.stability
    o = op.optimism
    print(f"rows                  : {args.rows} ({result.body.search.scored} candidates)")
    print(f"search (baseline)     : {t_search:7.1f} s")
    print(
        f"stability             : {t_st:7.1f} s  = {t_st / t_search:.2f} x search  "
        f"({det.usable} resamples x {det.contenders} contenders; share "
        f"{det.share:.2f})"
    )
    print(
        f"optimism              : {t_op:7.1f} s  = {t_op / t_search:.2f} x search  "
        f"({o.outer_folds} outer x {o.inner_folds}-fold inner; ratio "
        f"{o.ratio:.4f})"
    )
    if args.processes > 1:
        mapper = process_mapper(args.processes)
        both, t_both = _timed(lambda: trust(True, True, mapper, args.processes))
        ref = trust(True, True)
        both, ref = (replace(r, elapsed_s=0.0) for r in (both, ref))
        same = json.dumps(to_jsonable(both)) == json.dumps(to_jsonable(ref))
        print(
            f"both, {args.processes} processes     : {t_both:7.1f} s  = "
            f"{t_both / t_search:.2f} x search  (in one process {t_st + t_op:.1f} s); "
            f"same result: {same}"
        )
        return 0 if same else 1
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
