"""Benchmark (run by hand): time and peak memory of the default search, 100k vs 1M rows.

5 numeric predictors of invented water-main data, default options (every applicable
transform, estimated predictor powers, screened search past 1000 candidates).  Each size runs
in a fresh process (so peak memory is that size's).  By default the table arrives as the
service takes a large table: a Parquet file (pyarrow, uncompressed float64 columns) POSTed as
a multipart upload to ``/v1/selections`` of the app in process (FastAPI's TestClient: the
route's decoding, validation, the selection and the JSON answer); ``--intake columns`` feeds
the contract's column lists through ``prepare`` and runs the selection in-process, as the
batch command does.  Prints wall and CPU seconds, candidates scored, peak resident memory
(``resource.getrusage``), with ``--trace`` also the peak traced Python allocations
(``tracemalloc``, which slows allocation-heavy steps, so the timing run leaves it off), and
the 1M/100k time ratio (target <= 10.5) and the 1M peak (target <= 2 GB).

    python tests/benchmarks/rows.py [--sizes 100000,1000000] [--time-limit 600] [--trace]
                                    [--intake upload|columns] [--compare | --compare-designs]

The two sizes are different tables, and the screened search is adaptive (its descent
moves on each table's own cross-validated errors), so the candidates scored differ in
number; the time per candidate scored is printed beside the totals.

``--compare`` runs every size twice, each in a fresh process: first with the per-fold
predictor powers of large tables estimated fold by fold on the rows (``estimate_powers`` per
training fold, the path before series cross-products), then as shipped
(``boxtidwell.estimate_fold_powers_by_series``), and prints the ratios and whether the
ranking is the same.  ``--compare-designs`` does the same for the designs of candidates with
estimated powers: all folds' designs as masked (K, n, p) products (the path before, with
``fastcv.BY_FOLD_DESIGN_CELLS`` raised past every table) against one fold at a time.
"""

from __future__ import annotations

import argparse
import json
import os
import subprocess
import sys

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.join(HERE, "..", "..")


def fold_by_fold(z, Xf, x, train, start, boxcox_form=True, labels=None):
    """The per-fold powers of a large table as before the series path: one exact
    ``estimate_powers`` per training fold."""
    from service.core import boxtidwell as bt
    from service.core.errors import CandidateFailure

    out = []
    for k, rows in enumerate(train):
        try:
            out.append(
                bt.estimate_powers(
                    z[rows], Xf[rows], x[rows], start=start, boxcox_form=boxcox_form, with_se=False
                )
            )
        except CandidateFailure as exc:
            raise CandidateFailure(f"fold {k + 1}: {exc.reason}") from None
    return out


def _parquet(cols: dict) -> bytes:
    import io

    import pyarrow as pa
    import pyarrow.parquet as pq

    buf = io.BytesIO()
    pq.write_table(pa.table(cols), buf, compression="none")
    return buf.getvalue()


def _upload(raw: bytes, time_limit: float) -> dict:
    """The Parquet file POSTed to /v1/selections as a multipart upload, in process."""
    from fastapi.testclient import TestClient
    from service.app import app

    options = {
        "response": "repair_cost",
        "predictors": [f"x{j}" for j in range(5)],
        "top": 3,
        "limits": {"time_limit_s": time_limit},
    }
    with TestClient(app, raise_server_exceptions=True) as client:
        r = client.post(
            "/v1/selections",
            files={
                "file": ("mains.parquet", raw, "application/octet-stream"),
                "options": (None, json.dumps(options), "application/json"),
            },
        )
    if r.status_code != 200:
        raise SystemExit(f"upload answered {r.status_code}: {r.text[:500]}")
    return r.json()


def one(
    n: int,
    time_limit: float,
    trace: bool = False,
    exact_folds: bool = False,
    intake: str = "upload",
    masked_designs: bool = False,
) -> dict:
    sys.path.insert(0, ROOT)
    from tests.benchmarks._common import Timer, pin_blas, water_mains

    pin_blas(1)
    if exact_folds:
        from service.core import fastcv

        fastcv.estimate_fold_powers_by_series = fold_by_fold
    if masked_designs:
        from service.core import fastcv

        fastcv.BY_FOLD_DESIGN_CELLS = float("inf")
    import resource
    import tracemalloc

    from service.api.encode import to_jsonable
    from service.core.data import prepare
    from service.selection.search import run_selection
    from service.selection.search_setup import SearchOptions

    cols = water_mains(n, 5, seed=1)
    if intake == "upload":
        raw = _parquet(cols)
        lists = None
    else:
        lists = {k: v.tolist() for k, v in cols.items()}
    del cols
    if trace:
        tracemalloc.start()
    with Timer() as t:
        if lists is None:
            out = _upload(raw, time_limit)
            del raw
        else:
            prep = prepare({"columns": lists}, "repair_cost", [f"x{j}" for j in range(5)])
            lists = None
            out = to_jsonable(
                run_selection(prep, SearchOptions(time_limit_s=time_limit, top=3), "bench")
            )
    traced = tracemalloc.get_traced_memory()[1] if trace else float("nan")
    rss_kb = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss
    s = out["search"]
    return {
        "rows": n,
        "wall_s": t.wall,
        "cpu_s": t.cpu,
        "scored": s["candidates_scored"],
        "failed": s["candidates_failed"],
        "screened": s["candidates_screened"],
        "strategy": s["strategy"]["name"],
        "stopped_by": s["strategy"]["stopped_by"],
        "peak_rss_gb": rss_kb / 1024**2,
        "peak_traced_gb": traced / 1024**3,
        "best_cv": s["best_cv"]["value"],
        "top": out["ranking"][0]["equation"],
        "ranking": [e["equation"] for e in out["ranking"]],
        "cv": [e["cv"]["value"] for e in out["ranking"]],
    }


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--sizes", default="100000,1000000")
    ap.add_argument("--time-limit", type=float, default=600.0)
    ap.add_argument("--one", type=int, default=None)
    ap.add_argument("--trace", action="store_true", help="also trace Python allocations")
    ap.add_argument("--intake", choices=["upload", "columns"], default="upload")
    ap.add_argument("--compare", action="store_true", help="fold by fold, then as shipped")
    ap.add_argument(
        "--compare-designs", action="store_true", help="masked all-folds designs, then as shipped"
    )
    ap.add_argument("--exact-folds", action="store_true", help=argparse.SUPPRESS)
    ap.add_argument("--masked-designs", action="store_true", help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.one is not None:
        print(
            json.dumps(
                one(
                    args.one,
                    args.time_limit,
                    args.trace,
                    args.exact_folds,
                    args.intake,
                    args.masked_designs,
                )
            )
        )
        return
    sys.path.insert(0, ROOT)
    from tests.benchmarks._common import machine

    print(machine())
    print(f"intake: {args.intake}")
    res = []
    compare = args.compare or args.compare_designs
    before_flag = "--exact-folds" if args.compare else "--masked-designs"
    before_name = "fold by fold" if args.compare else "masked designs"
    runs = [
        (int(v), e) for v in args.sizes.split(",") for e in ([True, False] if compare else [False])
    ]
    for n, before in runs:
        p = subprocess.run(
            [
                sys.executable,
                __file__,
                "--one",
                str(n),
                "--time-limit",
                str(args.time_limit),
                "--intake",
                args.intake,
            ]
            + (["--trace"] if args.trace else [])
            + ([before_flag] if before else []),
            capture_output=True,
            text=True,
            check=True,
        )
        r = json.loads(p.stdout.strip().splitlines()[-1])
        if compare and not before:
            b = res.pop()
            same = b["ranking"] == r["ranking"]
            dcv = max(abs(u - v) / abs(v) for u, v in zip(b["cv"], r["cv"], strict=False))
            print(
                f"{n:>8} rows: {before_name} {b['wall_s']:.1f} s wall / {b['cpu_s']:.1f} s CPU "
                f"/ {b['peak_rss_gb']:.2f} GB, as shipped {r['wall_s']:.1f} s wall / "
                f"{r['cpu_s']:.1f} s CPU / {r['peak_rss_gb']:.2f} GB: ratio "
                f"{b['wall_s'] / r['wall_s']:.2f}x wall, {b['cpu_s'] / r['cpu_s']:.2f}x CPU; "
                f"same ranking: {same}; largest relative CV change {dcv:.1e}"
            )
        res.append(r)
        label = f" ({before_name})" if before else ""
        print(
            f"{n:>8} rows{label}: {r['wall_s']:.1f} s wall, {r['cpu_s']:.1f} s CPU, {r['scored']} scored "
            f"({r['failed']} failed, {r['screened']} screened, {r['strategy']}, stopped by "
            f"{r['stopped_by']}), {r['wall_s'] / max(r['scored'] + r['failed'], 1) * 1e3:.0f} ms "
            f"per candidate, peak RSS {r['peak_rss_gb']:.2f} GB, peak traced "
            f"{r['peak_traced_gb']:.2f} GB; best CV {r['best_cv']:.5g}; top {r['top']}"
        )
    if len(res) == 2 and not compare:
        a, b = res
        per = (b["cpu_s"] / b["scored"]) / (a["cpu_s"] / a["scored"])
        print(
            f"time ratio {b['rows']}/{a['rows']} rows: {b['wall_s'] / a['wall_s']:.2f}x wall, "
            f"{b['cpu_s'] / a['cpu_s']:.2f}x CPU (target <= 10.5x), {per:.2f}x CPU per "
            f"candidate scored ({a['scored']} and {b['scored']} scored); peak at "
            f"{b['rows']}: {b['peak_rss_gb']:.2f} GB (target <= 2 GB)"
        )


if __name__ == "__main__":
    main()
