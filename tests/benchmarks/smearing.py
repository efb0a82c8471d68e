"""Benchmark (run by hand): smeared means of power-type back-transforms, the exact double sum
against the binned series (``_smear_tree.smear_power_binned``), in the same run.

1. The smearing calls of one 2,000-row x 1-predictor default selection (the demo's water-main
   repair costs, ``pipe_length_m`` only): every call the request makes for square, reciprocal,
   power and Box-Cox scales that the one-block root series does not settle, recorded once,
   then timed both ways; max relative difference of the means.
2. Synthetic sizes (t(4) residuals, etas spread across the singular point), also for
   Yeo-Johnson (against ``retransform._exact``): exact vs binned
   (400 x 1,600 and 2,000 x 8,000; ``--large`` adds 5,000 x 20,000).
3. The same 2,000 x 1 request in-process (``run_selection_request``), alternating "before"
   (power-form smearing as the exact sum wherever the root series does not apply, which
   is what the service did at this size) and "after" (the binned path); best of ``--runs``.

CPU seconds (``time.process_time``) are printed beside wall seconds: the machine is shared.

    python tests/benchmarks/smearing.py [--runs 3] [--rows 2000] [--large]
"""

from __future__ import annotations

import argparse
import os
import sys

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", ".."))

from tests.benchmarks._common import Timer, machine, pin_blas

pin_blas(1)

import numpy as np
from service.api.encode import to_jsonable
from service.api.options import selection_job, service
from service.api.schemas import SelectionRequest
from service.core import _smear_tree as st
from service.core import retransform
from service.core import transforms as tr
from service.demo import demo_columns
from service.selection.request import run_selection


def exact_dispatch(eta, e, form):
    """The power-form smearing before the binned path: the root series where it applies,
    the exact double sum for every other eta."""
    beta, gamma, delta, p, zero = form
    out, done = st.smear_power_root(eta, e, beta, gamma, delta, p)
    if np.any(~done):
        out[~done] = st.exact_power(eta[~done], e, beta, gamma, delta, p, zero)
    return np.where(np.isfinite(out), out, np.nan)


def run_selection_request(req: SelectionRequest) -> dict:
    """One selection request end to end, as the route runs it (typed options, then the search)."""
    return to_jsonable(run_selection(selection_job(req), service()))


def request(rows: int) -> SelectionRequest:
    cols = demo_columns(rows)
    return SelectionRequest.model_validate(
        {
            "data": {
                "columns": {
                    "repair_cost": cols["repair_cost"],
                    "pipe_length_m": cols["pipe_length_m"],
                }
            },
            "response": "repair_cost",
            "predictors": ["pipe_length_m"],
        }
    )


def record_calls(req: SelectionRequest) -> list[tuple[np.ndarray, np.ndarray, tuple]]:
    """(etas the root series left, residuals, form) of every power-form smearing call."""
    calls = []
    binned = st.smear_power_binned
    small = st.exact_power

    def keep_binned(eta, e, *form):
        calls.append((eta.copy(), e.copy(), form))
        return binned(eta, e, *form)

    def keep_small(eta, e, *form):
        calls.append((eta.copy(), e.copy(), form))
        return small(eta, e, *form)

    st.smear_power_binned, st.exact_power = keep_binned, keep_small
    try:
        run_selection_request(req)
    finally:
        st.smear_power_binned, st.exact_power = binned, small
    return calls


def exact_yeo_johnson(eta, e, lam):
    return retransform._exact(tr.Transform("yeo_johnson", lam=lam), eta, e)


def compare(calls, exact=st.exact_power, fast=st.smear_power_binned) -> None:
    """Time the exact double sum and the binned path on the same calls; the largest
    difference relative to |exact mean| (power forms) or to max(1, |exact mean|) (Yeo-Johnson,
    whose bound is 1e-12 of mean(1 + |y_i|), at least that)."""
    for eta, e, form in calls:  # warm the per-exponent bounds
        fast(eta[:20], e, *form)
    worst = 0.0
    with Timer() as t_exact:
        ref = [exact(eta, e, *form) for eta, e, form in calls]
    with Timer() as t_binned:
        got = [fast(eta, e, *form) for eta, e, form in calls]
    floor = 1.0 if fast is st.smear_yeo_johnson else 0.0
    for a, b in zip(ref, got, strict=True):
        assert np.array_equal(np.isnan(a), np.isnan(b))
        ok = np.isfinite(a) & (np.maximum(np.abs(a), floor) > 0)
        if ok.any():
            worst = max(
                worst, float(np.max(np.abs(b[ok] - a[ok]) / np.maximum(np.abs(a[ok]), floor)))
            )
    terms = sum(eta.size * e.size for eta, e, _ in calls)
    print(
        f"  exact  {t_exact.cpu:7.3f} s CPU {t_exact.wall:7.3f} s wall\n"
        f"  binned {t_binned.cpu:7.3f} s CPU {t_binned.wall:7.3f} s wall"
        f"   ratio (CPU) {t_exact.cpu / max(t_binned.cpu, 1e-9):5.1f}x"
        f"   max difference {worst:.1e} (stated bound {st.BIN_RTOL:g} + rounding)"
        f"   [{len(calls)} calls, {terms / 1e6:.1f}M terms]"
    )


def synthetic(sizes) -> None:
    rng = np.random.default_rng(0)
    cases = [
        (tr.Transform("square"), 0.3),
        (tr.Transform("reciprocal"), 1.0),
        (tr.Transform("power", exponent=-0.5), 1.0),
        (tr.Transform("box_cox", lam=0.3), 0.5),
        (tr.Transform("box_cox", lam=-0.4), 1.0),
    ]
    for m, n in sizes:
        print(f"- {m} etas x {n} residuals (t(4) x 0.5; etas +-1 around the centre)")
        for t, centre in cases:
            e = rng.standard_t(4, n) * 0.5
            eta = rng.uniform(centre - 1, centre + 1, m)
            print(f" {t.label('y')}:")
            compare([(eta, e, st.power_form(t))])
        for lam in (0.5, -0.8, 2.5):  # the branch point z = 0 inside; a pole for -0.8, 2.5
            e = rng.standard_t(4, n) * 0.5
            eta = rng.uniform(-1, 1, m)
            print(f" yeo_johnson(y, lambda={lam:g}):")
            compare([(eta, e, (lam,))], exact_yeo_johnson, st.smear_yeo_johnson)


def request_before_after(req: SelectionRequest, runs: int) -> None:
    binned = retransform._smear_power
    best = {"before": [np.inf, np.inf], "after": [np.inf, np.inf]}
    bodies = {}
    run_selection_request(req)  # warm caches and imports
    for _ in range(runs):
        for label in ("before", "after"):
            retransform._smear_power = exact_dispatch if label == "before" else binned
            try:
                with Timer() as t:
                    bodies[label] = run_selection_request(req)
            finally:
                retransform._smear_power = binned
            best[label][0] = min(best[label][0], t.cpu)
            best[label][1] = min(best[label][1], t.wall)
    for label, (cpu, wall) in best.items():
        print(f"  {label:6s} {cpu:6.3f} s CPU {wall:6.3f} s wall (best of {runs})")
    print(f"  ratio (CPU) {best['before'][0] / best['after'][0]:.2f}x")
    a = bodies["before"]["ranking"]
    b = bodies["after"]["ranking"]
    same = [x["specification"] for x in a] == [x["specification"] for x in b]
    print(
        f"  same ranking: {same}; largest relative change of any number in the body "
        f"{largest_change(bodies['before'], bodies['after']):.1e}"
    )


def largest_change(a, b) -> float:
    """Largest relative difference between the numbers at the same place of two bodies
    (time stamps and signatures left out)."""
    if isinstance(a, dict) and isinstance(b, dict):
        keys = (a.keys() & b.keys()) - {"elapsed_s", "signature", "checksum", "created"}
        return max((largest_change(a[k], b[k]) for k in keys), default=0.0)
    if isinstance(a, list) and isinstance(b, list):
        return max((largest_change(x, y) for x, y in zip(a, b, strict=False)), default=0.0)
    if isinstance(a, float) and isinstance(b, float) and a != b:
        return abs(a - b) / max(abs(a), abs(b))
    return 0.0


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--runs", type=int, default=3)
    ap.add_argument("--rows", type=int, default=2000)
    ap.add_argument("--large", action="store_true", help="add 5000 x 20000 (about 15 s exact)")
    args = ap.parse_args()
    print(machine())
    req = request(args.rows)
    print(f"1. power-form smearing calls of the {args.rows} x 1 default request")
    compare(record_calls(req))
    print("2. synthetic sizes")
    synthetic([(400, 1600), (2000, 8000)] + ([(5000, 20000)] if args.large else []))
    print(f"3. the {args.rows} x 1 default request in-process")
    request_before_after(req, args.runs)


if __name__ == "__main__":
    main()
