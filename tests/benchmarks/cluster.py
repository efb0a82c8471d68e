"""Benchmark: a batch month (one selection per segment, one file each) on this machine's
process pool versus a Dask LocalCluster with the same number of worker processes, the
cluster's segment rows sent with the tasks (scatter) and read from a shared Parquet dataset.

Run by hand from the repository root (never in CI):

    python tests/benchmarks/cluster.py [--segments 1000] [--rows 500] [--workers 2]
                                       [--search reduced|tiny|full] [--skip-inline]

    # per-task overhead: many small segments with the smallest search
    python tests/benchmarks/cluster.py --segments 1000 --rows 40 --search tiny

Invented data: repair costs of water mains in supply zones (tests/benchmarks/groups.py).
Every run goes through ``service.batch.run_job`` exactly as ``python -m service select
--group-by zone --out DIR`` does: in this process (the baseline), the process pool
(``run_pool``), and one LocalCluster (``run_dask``) twice, with ``--transport scatter`` and
``--transport parquet`` (the dataset written inside the timing).  The search is the reduced
one a monthly job typically pins (response identity / log / square root, predictors
identity / log, 5 folds); ``--search tiny`` (identity scales only, 3 folds) makes each task
short so that per-task overhead shows; ``--search full`` is the service's default candidate
space.  Prints the machine's load (``uptime``) before and after, wall times, segments per
second, ratios measured in this run, the per-segment overhead of each cluster path over the
pool (start-up excluded and reported apart), and whether every segment file holds the same
result.
"""

from __future__ import annotations

import argparse
import json
import os
import re
import subprocess
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
from service.api.options import search_options
from service.api.schemas import SelectionRequest
from service.batch import DaskSession, Job, run_dask, run_inline, run_job, run_pool
from service.batch_parquet import SharedParquet, segment_bytes
from service.core.data import prepare
from service.settings import get_settings

_ELAPSED = re.compile(r'"elapsed_s":\s*[-0-9.eE+]+')
SEARCHES = {
    "reduced": {
        "transforms": {"response": ["identity", "log", "sqrt"], "predictors": ["identity", "log"]},
        "validation": {"folds": 5, "seed": 7},
        "top": 3,
    },
    "tiny": {
        "transforms": {"response": ["identity"], "predictors": ["identity"]},
        "validation": {"folds": 3, "seed": 7},
        "top": 1,
    },
    "full": {},
}


def uptime() -> str:
    try:
        return subprocess.run(["uptime"], capture_output=True, text=True, check=True).stdout.strip()
    except (OSError, subprocess.CalledProcessError):
        return "load average " + ", ".join(f"{x:.2f}" for x in os.getloadavg())


def _results(out: Path) -> dict:
    manifest = json.loads((out / "manifest.json").read_text())
    return {
        e["segment"]: _ELAPSED.sub(
            "", json.dumps(json.loads((out / e["file"]).read_text())["result"])
        )
        for e in manifest["segments"]
    }


def cpu_counted(name, sub, opts, version, model):
    """``run_segment`` that also reports the CPU seconds its task took (removed again before
    the file is written): of its process while it ran (``_task_cpu_s``: in a Dask worker
    this includes the worker's own threads, its event loop, heartbeats and profiler) and of
    the thread that ran it alone (``_task_thread_s``: the selection's own work)."""
    from service.batch import run_segment

    c, th = time.process_time(), time.thread_time()
    body = run_segment(name, sub, opts, version, model)
    body["_task_cpu_s"] = time.process_time() - c
    body["_task_thread_s"] = time.thread_time() - th
    return body


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--segments", type=int, default=1000)
    ap.add_argument("--rows", type=int, default=500)
    ap.add_argument("--workers", type=int, default=2)
    ap.add_argument("--search", choices=sorted(SEARCHES), default="reduced")
    ap.add_argument("--skip-inline", action="store_true", help="pool and cluster only")
    ap.add_argument(
        "--worker-profile",
        choices=("on", "off"),
        default="off",
        help="Dask's statistical profiler in the workers (setting BESTSCALE_DASK_WORKER_PROFILE; "
        "off is the default of --cluster local)",
    )
    args = ap.parse_args()
    pin_blas(1)
    print(machine())
    print(f"uptime before          : {uptime()}")
    table = zones(args.segments, args.rows)
    body = {
        "response": "repair_cost",
        "predictors": ["pipe_length_m", "pipe_age_years", "soil"],
        "group_by": "zone",
        **SEARCHES[args.search],
    }
    req = SelectionRequest.model_validate({**body, "data": {"columns": table}})
    prep = prepare({"columns": table}, "repair_cost", body["predictors"], ["soil"], None, "zone")
    opts = search_options(req)
    tmp = Path(tempfile.mkdtemp(prefix="bestscale-bench-"))
    print(
        f"segments x rows        : {args.segments} x {args.rows}, {args.search} search, "
        f"{segment_bytes(prep) / 2**20:.1f} MiB of segment columns"
    )

    cpu: dict[str, tuple[float, float]] = {}

    def timed(name, runner, shared=None, worker_cpu=None):
        """Wall time, and CPU per segment, which the machine's load disturbs far less: of this
        process (the client, and a LocalCluster's scheduler, which runs here), inside the
        tasks, and (cluster) of the worker processes in all, so the rest is Dask's own work
        in the workers."""
        job = Job(tmp / name, body, prep, opts, "bench")
        in_tasks = [0.0, 0.0]

        def counted(tasks):
            for seg, b in runner(tasks):
                in_tasks[0] += b.pop("_task_cpu_s", 0.0)
                in_tasks[1] += b.pop("_task_thread_s", 0.0)
                yield seg, b

        w0 = worker_cpu() if worker_cpu else 0.0
        c0, t = time.process_time(), time.perf_counter()
        summary = run_job(job, counted, shared=shared)
        dt = time.perf_counter() - t
        here = time.process_time() - c0
        work = (worker_cpu() - w0) if worker_cpu else float("nan")
        cpu[name] = (here, in_tasks[0], work, in_tasks[1])
        c = summary["counts"]
        ms = 1000 / args.segments
        print(
            f"{name:<23}: {dt:8.1f} s  {args.segments / dt:7.2f} segments/s  "
            f"({dt * ms:.1f} ms per segment; {c['ok']} ok, {c['failed']} failed)\n"
            f"{'':<23}  CPU per segment: {here * ms:.1f} ms here, {in_tasks[0] * ms:.1f} ms in "
            f"tasks ({in_tasks[1] * ms:.1f} ms in the task's own thread)"
            + (f", {work * ms:.1f} ms in worker processes" if worker_cpu else "")
        )
        return dt

    runs = []
    t_in = None
    if not args.skip_inline:
        runs.append("in-process (baseline)")
        t_in = timed(runs[-1], partial(run_inline, fn=cpu_counted))
    # the pool starts its processes inside the timing (it lives for one call)
    runs.append(f"pool, {args.workers} processes")
    t_pool = timed(runs[-1], partial(run_pool, processes=args.workers, fn=cpu_counted))
    t = time.perf_counter()
    # the product's setting, read when the LocalCluster starts (its workers inherit it)
    os.environ["BESTSCALE_DASK_WORKER_PROFILE"] = "true" if args.worker_profile == "on" else "false"
    get_settings.cache_clear()
    session = DaskSession("local", args.workers)
    session.client.run(lambda: __import__("service.batch"))  # workers import the code once
    t_start = time.perf_counter() - t
    print(
        f"cluster start-up (once): {t_start:8.1f} s  dashboard {session.dashboard}  "
        f"(worker profiler {args.worker_profile})"
    )

    def cluster_cpu() -> float:
        return sum(session.client.run(time.process_time).values())

    try:
        runs.append("cluster, scatter")
        t_scatter = timed(
            runs[-1], partial(run_dask, client=session.client, fn=cpu_counted), None, cluster_cpu
        )
        shared = SharedParquet(None, client=session.client)
        runs.append("cluster, parquet")
        try:
            t_parquet = timed(
                runs[-1],
                partial(run_dask, client=session.client, fn=cpu_counted),
                shared,
                cluster_cpu,
            )
        finally:
            shared.close(finished=True)
    finally:
        session.close()
    print(f"uptime after           : {uptime()}")

    def ratio(label, a, b):
        print(
            f"{label:<23}: {a / b:8.3f}  ({(a - b) / args.segments * 1000:+.1f} ms per segment, "
            f"{100 * (a / b - 1):+.1f} %)"
        )

    ratio("scatter / pool", t_scatter, t_pool)
    ratio("parquet / pool", t_parquet, t_pool)
    ratio("parquet / scatter", t_parquet, t_scatter)
    if t_in is not None:
        ratio("pool / in-process", t_pool, t_in)
        ratio("scatter / in-process", t_scatter, t_in)
    pool_here, pool_tasks, _, pool_thread = cpu[runs[-3]]
    for name in runs[-2:]:
        here, tasks, work, thread = cpu[name]
        print(
            f"CPU {name} / pool: in tasks {tasks / pool_tasks:.3f} (task thread alone "
            f"{thread / pool_thread:.3f}), here {here / pool_here:.3f}; the worker's other "
            f"threads while a task ran {(tasks - thread) / args.segments * 1000:+.1f} ms, "
            f"Dask's own work between tasks {(work - tasks) / args.segments * 1000:+.1f} ms "
            "per segment"
        )
    results = [_results(tmp / r) for r in runs]
    same = all(r == results[0] for r in results[1:])
    print(f"same segment results   : {same}  (files under {tmp})")
    return 0 if same else 1


if __name__ == "__main__":
    raise SystemExit(main())
