"""Benchmark: the diagnostic figure and the HTML report, our SVG route against matplotlib's.

Run by hand from the repository root (never in CI):

    python tests/benchmarks/figures.py [--baseline REV] [--repeats 3]

The baseline is the matplotlib renderer as it was at git revision ``REV`` (default
``d7060f5``, the last one that drew figures with matplotlib), loaded from ``git show`` and
timed in the same run on the same plot data.  Cases: the shipped demo's rank-1
specification (300 rows, two numeric predictors) and 20,000 invented rows with two
predictors handed to the figure whole (``max_points`` 20000, the largest a request may ask)
and at the default 2000.  Printed per case and format: median wall and CPU seconds of
``repeats`` draws and the size in KB; then the demo's ``/v1/reports`` answer (in-process)
with each renderer, and the cost of building the report's plot data.

``--paths`` then times what the report's plot data and drawing cost with the smoother and
line simplification of before, patched back in the same run: statsmodels' ``lowess`` for
every curve (one local fit per call; now ``core/lowess.py`` fits all of a pass at once)
and Ramer-Douglas-Peucker one segment per step (now one recursion level per step), per
curve size and for the demo's three detailed entries (plot data, then the three figures).
"""

from __future__ import annotations

import argparse
import importlib.util
import math
import os
import statistics
import subprocess
import sys
import time
import types

ROOT = os.path.join(os.path.dirname(os.path.abspath(__file__)), "..", "..")
sys.path.insert(0, ROOT)
sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))

import numpy as np
from _common import machine, pin_blas
from service.api.render import contract
from service.core.data import prepare
from service.core.spec import Specification
from service.demo import demo_request
from service.report import figures as svg_route
from service.selection.plots import report_plots, specification_plots


def _baseline(rev: str) -> types.ModuleType:
    """The renderer of ``rev`` as a module (its relative imports made absolute)."""
    source = subprocess.run(
        ["git", "show", f"{rev}:service/report/figures.py"],
        cwd=ROOT,
        check=True,
        capture_output=True,
        text=True,
    ).stdout
    source = source.replace("from .safetext import", "from service.report.safetext import")
    spec = importlib.util.spec_from_loader("baseline_figures", loader=None)
    assert spec is not None
    module = importlib.util.module_from_spec(spec)
    exec(compile(source, f"{rev}:service/report/figures.py", "exec"), module.__dict__)
    return module


def _old_route(old: types.ModuleType):
    """The baseline renderer, handed the plot data in the JSON form it was written for (the
    figures of today draw the typed plot data)."""

    def render(plots, fmt: str = "svg", title: str | None = None) -> bytes:
        return old.render_figure(contract(plots), fmt, title=title)

    return render


def _measure(render, plots, fmt: str, title: str, repeats: int) -> tuple[float, float, int]:
    walls, cpus = [], []
    out = b""
    for _ in range(repeats):
        t, c = time.perf_counter(), time.process_time()
        out = render(plots, fmt, title=title)
        walls.append(time.perf_counter() - t)
        cpus.append(time.process_time() - c)
    return statistics.median(walls), statistics.median(cpus), len(out)


def _demo_plots():
    req = demo_request()
    prep = prepare(
        req["data"], req["response"], req["predictors"], req.get("categorical", []), None
    )
    from service.selection.search import run_selection
    from service.selection.search_setup import SearchOptions

    opts = SearchOptions(time_limit_s=600.0)
    selection = run_selection(prep, opts, "bench")  # its ranking entries typed
    entry = selection.ranking[0]
    plots = specification_plots(entry.specification, prep, 0.05, 0, 2000)
    return selection, prep, plots, entry.equation


def _large_plots(max_points: int):
    rng = np.random.default_rng(1)
    n = 20_000
    x1, x2 = rng.uniform(1, 50, n), rng.uniform(0, 10, n)
    y = np.exp(1 + 0.5 * np.log(x1) + 0.1 * x2 + rng.normal(0, 0.3, n))
    prep = prepare(
        {"columns": {"y": y.tolist(), "x1": x1.tolist(), "x2": x2.tolist()}}, "y", ["x1", "x2"]
    )
    spec = Specification.from_dict(
        {
            "response": {"column": "y", "transform": {"name": "log"}},
            "predictors": [
                {"column": "x1", "transform": {"name": "log"}},
                {"column": "x2"},
            ],
        }
    )
    return specification_plots(spec, prep, 0.05, 0, max_points)


def _simplify_one_at_a_time(px, py, tolerance=0.25):
    """The line simplification as it was: one segment per numpy round trip."""
    n = len(px)
    if n <= 2:
        return np.arange(n)
    keep = np.zeros(n, dtype=bool)
    keep[0] = keep[-1] = True
    stack = [(0, n - 1)]
    while stack:
        a, b = stack.pop()
        if b - a < 2:
            continue
        sx, sy = px[a + 1 : b] - px[a], py[a + 1 : b] - py[a]
        dx, dy = px[b] - px[a], py[b] - py[a]
        norm = math.hypot(dx, dy)
        dist = np.hypot(sx, sy) if norm == 0 else np.abs(dx * sy - dy * sx) / norm
        i = int(np.argmax(dist))
        if dist[i] > tolerance:
            k = a + 1 + i
            keep[k] = True
            stack += [(a, k), (k, b)]
    return np.flatnonzero(keep)


def _best(fn, repeats: int) -> tuple[float, float]:
    """Best-of-``repeats`` (CPU, wall) seconds."""
    best = (math.inf, math.inf)
    for _ in range(repeats):
        t, c = time.perf_counter(), time.process_time()
        fn()
        best = min(best, (time.process_time() - c, time.perf_counter() - t))
    return best


def _paths(body, prep, repeats: int) -> None:
    from service.core import lowess as ours
    from service.core import plots as core_plots
    from service.report import svg
    from statsmodels.nonparametric.smoothers_lowess import lowess as sm_lowess

    rng = np.random.default_rng(0)
    print("LOWESS per curve (frac 2/3, 3 robustness passes, delta 1% of the range), CPU ms:")
    for n in (300, 1000, 2000, 20000):
        x = rng.uniform(0, 10, n)
        y = np.sin(x) + rng.standard_t(3, n)
        d = 0.01 * float(np.ptp(x))
        a = _best(lambda x=x, y=y, d=d: sm_lowess(y, x, frac=2 / 3, it=3, delta=d), repeats)
        b = _best(lambda x=x, y=y, d=d: ours.lowess(y, x, 2 / 3, 3, d), repeats)
        same = np.array_equal(
            sm_lowess(y, x, frac=2 / 3, it=3, delta=d), ours.lowess(y, x, 2 / 3, 3, d)
        )
        print(
            f"  {n:6d} rows: statsmodels {1e3 * a[0]:7.1f}, ours {1e3 * b[0]:7.1f}, "
            f"ratio {a[0] / b[0]:5.2f}x, identical: {same}"
        )

    def plots_and_figures():
        for value in report_plots(body, prep, 0.05, 0).values():
            if not isinstance(value, str):
                svg_route.render_figure(value)

    saved = (core_plots.lowess, svg.simplify)
    out = {}
    for label in ("before", "after"):
        if label == "before":
            core_plots.lowess = lambda y, x, frac, it, delta: sm_lowess(
                y, x, frac=frac, it=it, delta=delta
            )
            svg.simplify = _simplify_one_at_a_time
        try:
            out[label] = (
                _best(lambda: report_plots(body, prep, 0.05, 0), repeats),
                _best(plots_and_figures, repeats),
                [
                    svg_route.render_figure(v)
                    for v in report_plots(body, prep, 0.05, 0).values()
                    if not isinstance(v, str)
                ],
            )
        finally:
            core_plots.lowess, svg.simplify = saved
    (pa, fa, sa), (pb, fb, sb) = out["before"], out["after"]
    print(
        f"demo report, 3 entries, CPU s (best of {repeats}): plot data {pa[0]:.3f} -> "
        f"{pb[0]:.3f} ({pa[0] / pb[0]:.2f}x); plot data and figures {fa[0]:.3f} -> "
        f"{fb[0]:.3f} ({fa[0] / fb[0]:.2f}x); same SVG bytes: {sa == sb}"
    )


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--baseline", default="d7060f5", help="git revision of the matplotlib route")
    ap.add_argument("--repeats", type=int, default=3, help="draws per measurement (median)")
    ap.add_argument("--paths", action="store_true", help="only the smoother and path timings")
    args = ap.parse_args()
    pin_blas(1)
    old = _baseline(args.baseline)
    old_render = _old_route(old)
    print(machine())
    body, prep, demo, title = _demo_plots()
    if args.paths:
        _paths(body, prep, max(args.repeats, 3))
        return 0
    cases = [
        ("demo, 300 rows", demo, title),
        ("20,000 rows, max_points 20000", _large_plots(20_000), "log(y) on log(x1) and x2"),
        ("20,000 rows, max_points 2000", _large_plots(2_000), "log(y) on log(x1) and x2"),
    ]
    print(f"{'case':32} {'format':6} {'route':10} {'wall s':>8} {'CPU s':>8} {'KB':>8}")
    for name, plots, ttl in cases:
        for fmt in ("svg", "png"):
            base = _measure(old_render, plots, fmt, ttl, args.repeats)
            new = _measure(svg_route.render_figure, plots, fmt, ttl, args.repeats)
            for route, (wall, cpu, size) in (("matplotlib", base), ("svg", new)):
                print(f"{name:32} {fmt:6} {route:10} {wall:8.3f} {cpu:8.3f} {size / 1024:8.0f}")
            print(
                f"{'':32} {fmt:6} {'ratio':10} {base[0] / new[0]:7.1f}x {base[1] / new[1]:7.1f}x"
                f" {base[2] / new[2]:7.1f}x"
            )
    # the report: plot data of the three detailed entries, then the whole answer per renderer
    t, c = time.perf_counter(), time.process_time()
    report_plots(body, prep, 0.05, 0)
    print(
        f"report plot data (3 entries): {time.perf_counter() - t:.3f} s wall, "
        f"{time.process_time() - c:.3f} s CPU"
    )
    from fastapi.testclient import TestClient
    from service.app import app
    from service.report import html

    client = TestClient(app)
    req = demo_request()
    client.post("/v1/reports", json=req)  # warm: imports, first fits
    for route, render in (("matplotlib", old_render), ("svg", svg_route.render_figure)):
        html.render_figure = render
        walls, cpus, size = [], [], 0
        for _ in range(args.repeats):
            t, c = time.perf_counter(), time.process_time()
            r = client.post("/v1/reports", json=req)
            walls.append(time.perf_counter() - t)
            cpus.append(time.process_time() - c)
            assert r.status_code == 200, r.text
            size = len(r.content)
        print(
            f"/v1/reports demo, {route:10}: {statistics.median(walls):.2f} s wall, "
            f"{statistics.median(cpus):.2f} s CPU, {size / 1024:.0f} KB"
        )
    html.render_figure = svg_route.render_figure
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
