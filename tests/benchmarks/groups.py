"""Benchmark: one selection per segment, in this process versus a pool of worker processes.

Run by hand from the repository root (never in CI):

    python tests/benchmarks/groups.py [--segments 100] [--rows 500] [--processes 2]

Invented data: repair costs of water mains in ``segments`` supply zones, ``rows`` repairs
each, generated on the log scale with zone-specific coefficients.  The baseline is the
in-process run measured in the same invocation; the pool run uses
``workers.map_in_processes`` with the module-level ``groups.select_group`` (what
``run_grouped`` does with a process mapper).  Prints wall times, their ratio, the pool's
one-off start-up, and whether both runs give the same JSON apart from timing fields.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import sys
import time

import numpy as np

sys.path.insert(0, os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", ".."))

from service.api.encode import to_jsonable
from service.api.errors import with_group_problems
from service.core.data import prepare
from service.selection.groups import GroupTask, group_parts, run_grouped, select_group
from service.selection.search_setup import SearchOptions
from service.selection.workers import map_in_processes
from threadpoolctl import threadpool_limits


def zones(segments: int, rows: int, seed: int = 2027) -> dict:
    rng = np.random.default_rng(seed)
    n = segments * rows
    zone = np.repeat([f"zone-{i:03d}" for i in range(segments)], rows)
    length = np.round(np.exp(rng.uniform(math.log(4.0), math.log(600.0), n)), 1)
    age = rng.integers(1, 81, n)
    soil = rng.choice(["clay", "loam", "sand"], n, p=[0.35, 0.4, 0.25])
    slope = np.repeat(rng.uniform(0.6, 0.9, segments), rows)
    base = np.repeat(rng.uniform(4.8, 5.6, segments), rows)
    log_cost = (
        base
        + slope * np.log(length)
        + 0.012 * age
        + np.select([soil == "clay", soil == "sand"], [0.25, -0.15], 0.0)
        + rng.normal(0.0, 0.25, n)
    )
    return {
        "repair_cost": np.round(np.exp(log_cost), 2).tolist(),
        "pipe_length_m": length.tolist(),
        "pipe_age_years": [int(a) for a in age],
        "soil": soil.tolist(),
        "zone": zone.tolist(),
    }


def _without_timing(obj):
    if isinstance(obj, dict):
        return {k: _without_timing(v) for k, v in obj.items() if k != "elapsed_s"}
    if isinstance(obj, list):
        return [_without_timing(v) for v in obj]
    return obj


def _noop(x):
    return x


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--segments", type=int, default=100)
    ap.add_argument("--rows", type=int, default=500)
    ap.add_argument("--processes", type=int, default=2)
    args = ap.parse_args()
    threadpool_limits(limits=1)

    prep = prepare(
        {"columns": zones(args.segments, args.rows)},
        "repair_cost",
        ["pipe_length_m", "pipe_age_years", "soil"],
        group_by="zone",
    )
    opts = SearchOptions(top=3)  # the service's defaults: every applicable transform

    t = time.perf_counter()
    base = with_group_problems(run_grouped(prep, opts, "bench")).groups
    t_in = time.perf_counter() - t

    t = time.perf_counter()
    map_in_processes(_noop, [0, 1], args.processes)  # starts the worker server once
    t_start = time.perf_counter() - t

    t = time.perf_counter()
    parts = group_parts(prep)
    tasks = [GroupTask(p, opts, "bench") for p in parts.values()]
    pooled = dict(zip(parts, map_in_processes(select_group, tasks, args.processes), strict=True))
    pooled = with_group_problems({"groups": pooled})["groups"]
    t_pool = time.perf_counter() - t

    same = json.dumps(_without_timing(to_jsonable(base)), sort_keys=True) == json.dumps(
        _without_timing(to_jsonable(pooled)), sort_keys=True
    )
    failed = sum(1 for b in base.values() if isinstance(b, dict))  # a problem entry
    print(f"segments x rows        : {args.segments} x {args.rows} ({failed} failed)")
    print(f"cores seen             : {os.cpu_count()}")
    print(f"in-process (baseline)  : {t_in:8.1f} s  ({t_in / args.segments:.2f} s per segment)")
    print(f"pool start-up (once)   : {t_start:8.1f} s")
    print(
        f"pool, {args.processes} processes      : {t_pool:8.1f} s  "
        f"({t_pool / args.segments:.2f} s per segment)"
    )
    print(
        f"ratio pool / baseline  : {t_pool / t_in:8.2f}  (with start-up "
        f"{(t_pool + t_start) / t_in:.2f})"
    )
    print(f"same JSON (no timings) : {same}")
    return 0 if same else 1


if __name__ == "__main__":
    raise SystemExit(main())
