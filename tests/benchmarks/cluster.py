"""Benchmark: a batch month (one selection per segment, one file each) on this machine's
process pool versus a Dask LocalCluster with the same number of worker processes.

Run by hand from the repository root (never in CI):

    python tests/benchmarks/cluster.py [--segments 1000] [--rows 500] [--workers 2] [--full]

Invented data: repair costs of water mains in supply zones (tests/benchmarks/groups.py).
All three runs go through ``service.batch.run_job`` exactly as ``python -m service select
--group-by zone --out DIR`` does: in this process (the baseline), the process pool
(``run_pool``) and the LocalCluster (``run_dask``).  The search is the reduced one a monthly
job typically pins (response identity / log / square root, predictors identity / log,
5 folds) unless ``--full`` asks for the service's default candidate space.  Prints wall
times, segments per second, the per-segment overhead of the cluster path over the pool
(start-up excluded and reported apart), and whether every segment file holds the same result.
"""

from __future__ import annotations

import argparse
import json
import os
import re
import sys
import tempfile
import time
from functools import partial
from pathlib import Path

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")
os.environ.setdefault("OMP_NUM_THREADS", "1")
sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", ".."))
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

from _common import machine, pin_blas
from groups import zones
from service.api.schemas import SelectionRequest
from service.api.selection import selection_options
from service.batch import DaskSession, Job, run_dask, run_inline, run_job, run_pool
from service.core.data import prepare

_ELAPSED = re.compile(r'"elapsed_s":\s*[-0-9.eE+]+')
REDUCED = {
    "transforms": {"response": ["identity", "log", "sqrt"], "predictors": ["identity", "log"]},
    "validation": {"folds": 5, "seed": 7},
    "top": 3,
}


def _results(out: Path) -> dict:
    manifest = json.loads((out / "manifest.json").read_text())
    return {
        e["segment"]: _ELAPSED.sub(
            "", json.dumps(json.loads((out / e["file"]).read_text())["result"])
        )
        for e in manifest["segments"]
    }


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--segments", type=int, default=1000)
    ap.add_argument("--rows", type=int, default=500)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--full", action="store_true", help="the default candidate space")
    ap.add_argument("--skip-inline", action="store_true", help="pool and cluster only")
    args = ap.parse_args()
    pin_blas(1)
    print(machine())
    table = zones(args.segments, args.rows)
    body = {
        "response": "repair_cost",
        "predictors": ["pipe_length_m", "pipe_age_years", "soil"],
        "group_by": "zone",
        **({} if args.full else REDUCED),
    }
    req = SelectionRequest.model_validate({**body, "data": {"columns": table}})
    prep = prepare({"columns": table}, "repair_cost", body["predictors"], ["soil"], None, "zone")
    opts = selection_options(req)
    tmp = Path(tempfile.mkdtemp(prefix="bestscale-bench-"))

    def timed(name, runner):
        job = Job(tmp / name, body, prep, opts, "bench")
        t = time.perf_counter()
        summary = run_job(job, runner)
        dt = time.perf_counter() - t
        c = summary["counts"]
        print(
            f"{name:<22}: {dt:8.1f} s  {args.segments / dt:6.2f} segments/s  "
            f"({dt / args.segments * 1000:.0f} ms per segment; {c['ok']} ok, {c['failed']} failed)"
        )
        return dt

    print(
        f"segments x rows        : {args.segments} x {args.rows}, "
        f"{'default' if args.full else 'reduced'} search"
    )
    t_in = None if args.skip_inline else timed("in-process (baseline)", run_inline)
    # the pool starts its processes inside the timing (it lives for one call)
    t_pool = timed(f"pool, {args.workers} processes", partial(run_pool, processes=args.workers))
    t = time.perf_counter()
    session = DaskSession("local", args.workers)
    session.client.run(lambda: __import__("service.batch"))  # workers import the code once
    t_start = time.perf_counter() - t
    print(f"cluster start-up (once): {t_start:8.1f} s  dashboard {session.dashboard}")
    try:
        t_dask = timed(
            f"LocalCluster, {args.workers} workers", partial(run_dask, client=session.client)
        )
    finally:
        session.close()
    per_seg = (t_dask - t_pool) / args.segments
    print(
        f"cluster / pool         : {t_dask / t_pool:8.3f}  "
        f"(overhead {per_seg * 1000:+.1f} ms per segment, {100 * (t_dask / t_pool - 1):+.1f} %)"
    )
    if t_in is not None:
        print(f"pool / in-process      : {t_pool / t_in:8.3f}")
        print(f"cluster / in-process   : {t_dask / t_in:8.3f}")
    runs = [f"pool, {args.workers} processes", f"LocalCluster, {args.workers} workers"]
    if t_in is not None:
        runs.insert(0, "in-process (baseline)")
    results = [_results(tmp / r) for r in runs]
    same = all(r == results[0] for r in results[1:])
    print(f"same segment results   : {same}  (files under {tmp})")
    return 0 if same else 1


if __name__ == "__main__":
    raise SystemExit(main())
