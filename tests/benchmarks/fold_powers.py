"""Benchmark (run by hand): estimated predictor powers and response lambdas in every training
fold, the per-fold loops against the batched paths.

Powers: one ``estimate_powers`` per fold (each fold's cross-products from its rows, then one
solve per fold) against ``estimate_fold_powers`` (fixed cross-products downdated from the
column bank, all folds' Gauss-Newton steps in one stacked solve).  Lambdas: one
``estimate_lambda`` per fold against ``fold_lambdas`` (the folds' X'X from the bank, every
fold's profile evaluations and Brent steps made together).

Both run in the same process on the same problems: every per-fold problem the demo
selection (service/demo, default options) poses is recorded, then solved by each path.
The demo selection itself is also timed end to end with the per-fold loops and with the
batched paths (both finding each candidate's folds alone), and then with each candidate's
all-rows powers, fold powers and fold lambdas found one candidate at a time against found
for all candidates together (``estimate_many_powers``, ``Scorer.powers_many``,
``Scorer.lambdas_many``: one stack across candidates x folds); ``--stacked-only`` runs that
last comparison alone.  Prints the machine
load (``uptime``), wall and CPU seconds (time.process_time; the machine is shared, so CPU
time is the steadier number), the ratios, and the largest difference between the powers.

    python tests/benchmarks/fold_powers.py [--repeat 3] [--rows 1000 3000 10000 30000]
        [--series 10000 100000 1000000] [--series-k 1 2 3] [--stacked-only]

``--series`` times the per-fold powers of large tables on invented tables of those sizes (5
folds x 2 repeats, k powers beside an intercept and three fixed columns, started at the
all-rows estimate): one exact ``estimate_powers`` per training fold (the path before),
``estimate_fold_powers_by_series`` (one call per repeat, as the scorer makes it) and, up to
100,000 rows, the batched ``estimate_fold_powers`` (all folds of all repeats); it prints wall
and CPU seconds of each, the ratios, the largest |power difference| against the fold-by-fold
path and how many folds the series path left to the exact one.

``--rows`` also times both paths on invented tables of those sizes (5 folds x 2 repeats, one
power beside two fixed columns; a Box-Cox lambda on three columns): the crossover where the
scorer stops batching (fastcv.POWER_BATCH_CELLS, LAMBDA_BATCH_CELLS) is read from it.
"""

from __future__ import annotations

import argparse
import os
import subprocess
import sys

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", ".."))

from tests.benchmarks._common import Timer, machine, pin_blas

pin_blas(1)

import numpy as np
from service.core import boxtidwell as bt
from service.core import fastcv
from service.core import likelihood as lk
from service.core.errors import CandidateFailure
from service.core.fitting import solve_batch


def per_fold_loop(self, S, XS, dyn, r, zs, per_fold, t, names, B, ETA, powers, fits=None):
    """The per-fold loop the batched path replaced: one estimate_powers and one solve per fold."""
    train = self.bank.index.train[r]
    p = B.shape[1]
    fixed_pos = [i for i in range(p) if i not in dyn.positions]
    logx = np.log(dyn.x)
    refits = 0
    for k in range(len(train)):
        rows = train[k]
        ztr = zs[k][rows]
        try:
            fit = bt.estimate_powers(
                ztr,
                XS[rows],
                dyn.x[rows],
                start=dyn.start,
                boxcox_form=dyn.boxcox_form,
                with_se=False,
            )
        except CandidateFailure as exc:
            raise CandidateFailure(f"fold {k + 1}: {exc.reason}") from None
        powers.append([float(a) for a in fit.powers])
        W, _ = bt.power_columns(logx, fit.powers, dyn.boxcox_form)
        X = np.empty((XS.shape[0], p))
        X[:, fixed_pos] = XS
        X[:, dyn.positions] = W
        Xtr = X[rows]
        b, ok = solve_batch((Xtr.T @ Xtr)[None], (Xtr.T @ ztr)[None])
        if ok[0]:
            B[k] = b[0]
        else:
            B[k] = fastcv._exact_refit(Xtr, ztr, names, k)
            refits += 1
        ETA[:, k] = X @ B[k]
    return refits


def demo_selection():
    from service.api.encode import to_jsonable
    from service.api.options import selection_job, service
    from service.api.schemas import SelectionRequest
    from service.demo import demo_request
    from service.selection.request import run_selection

    job = selection_job(SelectionRequest.model_validate(demo_request()))
    return to_jsonable(run_selection(job, service()))  # the contract form, as every exit


def record_problems():
    """Every call the demo selection makes to estimate_fold_powers and fold_lambdas."""
    calls, lam_calls = [], []
    real, real_lam = bt.estimate_fold_powers, lk.fold_lambdas

    def spy(*args, **kw):
        calls.append((args, kw))
        return real(*args, **kw)

    def spy_lam(*args, **kw):
        lam_calls.append((args, kw))
        return real_lam(*args, **kw)

    fastcv.estimate_fold_powers = spy
    fastcv.fold_lambdas = spy_lam
    try:
        demo_selection()
    finally:
        fastcv.estimate_fold_powers = real
        fastcv.fold_lambdas = real_lam
    return calls, lam_calls


def old_lambdas(lam_calls):
    out = []
    for (family, y, X, train, _grams, near), _kw in lam_calls:
        for rows in train:
            est = lk.estimate_lambda(family, y[rows], X[rows], with_interval=False, near=near)
            out.append(est.lam)
    return np.array(out)


def new_lambdas(lam_calls):
    out = []
    for args, kw in lam_calls:
        out.extend(lk.fold_lambdas(*args, **kw))
    return np.array(out, dtype=float)


def old_powers(calls):
    out = []
    for (z, Xf, x, train, start, bc), _kw in calls:
        for f, rows in enumerate(train):
            zf = z[rows] if z.ndim == 1 else z[f, rows]
            fit = bt.estimate_powers(
                zf, Xf[rows], x[rows], start=start, boxcox_form=bc, with_se=False
            )
            out.append(fit.powers)
    return out


def new_powers(calls):
    out = []
    for args, kw in calls:
        out.extend(f.powers for f in bt.estimate_fold_powers(*args, **kw))
    return out


def largest_change(a, b, path=""):
    """(largest relative difference, where) over the float fields of two answers."""
    if isinstance(a, dict) and isinstance(b, dict):
        items = [(k, a[k], b[k]) for k in a if k in b and k != "elapsed_s"]
    elif isinstance(a, list) and isinstance(b, list) and len(a) == len(b):
        items = list(zip(range(len(a)), a, b, strict=True))
    elif isinstance(a, float) and isinstance(b, float) and b != 0:
        return abs(a - b) / abs(b), path
    else:
        return 0.0, path
    return max((largest_change(x, y, f"{path}/{k}") for k, x, y in items), default=(0.0, path))


def by_rows(n: int, repeat: int) -> None:
    from service.core.folds import make_plan

    rng = np.random.default_rng(0)
    x = rng.uniform(1, 20, n)
    w = rng.normal(size=n)
    Xf = np.column_stack([np.ones(n), w, rng.uniform(0, 1, n)])
    z = 1 + 0.8 * np.log(x) + 0.2 * w + rng.normal(0, 0.3, n)
    plan = make_plan(n, 5, 2, 0)
    train = [np.flatnonzero(a != k) for a in plan.assignments for k in range(5)]
    start = bt.estimate_powers(z, Xf, x).powers
    y = np.exp(z / 3)
    grams = np.stack([Xf[r].T @ Xf[r] for r in train])
    for what, calls, fns in (
        ("powers", [((z, Xf, x[:, None], train, start, True), {})], (old_powers, new_powers)),
        ("lambdas", [(("box_cox", y, Xf, train, grams, 0.2), {})], (old_lambdas, new_lambdas)),
    ):
        cpu = []
        for fn in fns:
            times = []
            for _ in range(repeat):
                with Timer() as tm:
                    fn(calls)
                times.append(tm.cpu)
            cpu.append(min(times))  # best of ``repeat`` (CPU time: the machine is shared)
        print(
            f"{n:>8} rows, {what:<7}: loop cpu {cpu[0]:.3f} s, batched cpu {cpu[1]:.3f} s, "
            f"ratio {cpu[0] / cpu[1]:.2f}x"
        )


def series_rows(n: int, k: int, repeat: int) -> None:
    """Fold by fold vs series cross-products (vs batched) on an invented table of n rows."""
    from service.core.folds import make_plan

    rng = np.random.default_rng(n + k)
    x = rng.uniform(0.5, 40.0, (n, k))
    Xf = np.column_stack([np.ones(n), rng.normal(size=n), rng.uniform(0, 1, n), rng.gamma(2, 1, n)])
    z = 4.0 + 0.5 * np.log(x[:, 0]) + 0.1 * Xf[:, 1] + rng.normal(0, 0.3, n)
    for j in range(1, k):
        z += 0.2 * np.sqrt(x[:, j])
    plan = make_plan(n, 5, 2, 0)
    trains = [[np.flatnonzero(a != f) for f in range(5)] for a in plan.assignments]
    start = bt.estimate_powers(z, Xf, x, with_se=False).powers
    left = []
    real = bt.estimate_powers

    def counted(*a, **kw):
        left.append(1)
        return real(*a, **kw)

    def loop():
        return [
            real(z[r], Xf[r], x[r], start=start, with_se=False).powers for t in trains for r in t
        ]

    def series():
        bt.estimate_powers = counted
        try:
            return [
                f.powers
                for t in trains
                for f in bt.estimate_fold_powers_by_series(z, Xf, x, t, start)
            ]
        finally:
            bt.estimate_powers = real

    def batched():
        return [f.powers for f in bt.estimate_fold_powers(z, Xf, x, trains[0] + trains[1], start)]

    paths = [("fold by fold", loop), ("series", series)]
    if n <= 100_000:
        paths.append(("batched", batched))
    best = {}
    for _ in range(repeat):
        for name, fn in paths:
            left.clear()
            with Timer() as tm:
                res = fn()
            prev = best.get(name)
            if prev is None or tm.cpu < prev[1]:
                best[name] = (tm.wall, tm.cpu, res, len(left))
    ow, oc, old, _ = best["fold by fold"]
    line = [f"{n:>8} rows, k={k}: fold by fold wall {ow:.2f} s cpu {oc:.2f} s"]
    for name, _fn in paths[1:]:
        w, c, res, nleft = best[name]
        diff = max(float(np.max(np.abs(a - b))) for a, b in zip(old, res, strict=True))
        extra = f", {nleft} of 10 folds left to the exact path" if name == "series" else ""
        line.append(
            f"{name} wall {w:.2f} s cpu {c:.2f} s (ratio cpu {oc / c:.1f}x, wall {ow / w:.1f}x; "
            f"max |power diff| {diff:.1e}{extra})"
        )
    print("; ".join(line))


def one_at_a_time():
    """Patches that make the search find every candidate's all-rows powers, fold powers and
    fold lambdas one candidate at a time (Scorer.score's own path); returns an undo."""
    from service.core.fastcv import Scorer

    saved = (Scorer.powers_many, Scorer.lambdas_many, bt.estimate_many_powers)

    def each(problems, boxcox_form=True):
        out = []
        for z, Xf, x in problems:
            try:
                out.append(bt.estimate_powers(z, Xf, x, boxcox_form=boxcox_form))
            except CandidateFailure as exc:
                out.append(exc)
        return out

    Scorer.powers_many = lambda self, items: [None] * len(items)
    Scorer.lambdas_many = lambda self, items: [None] * len(items)
    bt.estimate_many_powers = each

    def undo():
        Scorer.powers_many, Scorer.lambdas_many, bt.estimate_many_powers = saved

    return undo


def stacked_selection(repeat: int) -> None:
    """The demo's default selection with the candidates' powers and lambdas found one
    candidate at a time, then stacked across candidates, in the same run."""
    best = {}
    for _ in range(repeat):
        for name in ("one candidate at a time", "stacked across candidates"):
            undo = one_at_a_time() if name.startswith("one") else (lambda: None)
            try:
                with Timer() as tm:
                    body = demo_selection()
            finally:
                undo()
            prev = best.get(name)
            if prev is None or tm.cpu < prev[1]:
                best[name] = (tm.wall, tm.cpu, body)
    (ow, oc, ob), (nw, nc, nb) = best["one candidate at a time"], best["stacked across candidates"]
    print(f"demo selection, one candidate at a time:   wall {ow:.2f} s  cpu {oc:.2f} s")
    print(f"demo selection, stacked across candidates: wall {nw:.2f} s  cpu {nc:.2f} s")
    print(f"ratio (one at a time / stacked): wall {ow / nw:.2f}x  cpu {oc / nc:.2f}x")
    same = [e["specification"] for e in ob["ranking"]] == [
        e["specification"] for e in nb["ranking"]
    ]
    print(f"same ranking: {same}")
    rel, where = largest_change(nb, ob)
    print(f"largest relative change of a number in the answer: {rel:.1e} ({where})")


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeat", type=int, default=3)
    ap.add_argument("--rows", type=int, nargs="*", default=[])
    ap.add_argument("--series", type=int, nargs="*", default=[])
    ap.add_argument("--series-k", type=int, nargs="*", default=[1, 2, 3])
    ap.add_argument("--series-only", action="store_true", help="skip the demo-selection parts")
    ap.add_argument(
        "--stacked-only",
        action="store_true",
        help="only the demo selection, one candidate at a time vs stacked across candidates",
    )
    args = ap.parse_args()
    if args.stacked_only:
        print("uptime:", subprocess.run(["uptime"], capture_output=True, text=True).stdout.strip())
        print(machine())
        stacked_selection(args.repeat)
        print("uptime:", subprocess.run(["uptime"], capture_output=True, text=True).stdout.strip())
        return
    if args.series_only:
        print("uptime:", subprocess.run(["uptime"], capture_output=True, text=True).stdout.strip())
        print(machine())
        for n in args.series:
            for k in args.series_k:
                series_rows(n, k, args.repeat)
        print("uptime:", subprocess.run(["uptime"], capture_output=True, text=True).stdout.strip())
        return
    print("uptime:", subprocess.run(["uptime"], capture_output=True, text=True).stdout.strip())
    print(machine())
    # the per-candidate sections below: every candidate's folds found by its own call
    undo = one_at_a_time()
    calls, lam_calls = record_problems()
    folds = sum(len(a[3]) for a, _ in calls)
    print(f"demo selection: {len(calls)} fold sets, {folds} per-fold power problems")
    best = {}
    for _ in range(args.repeat):
        for name, fn in (("per-fold loop", old_powers), ("batched", new_powers)):
            with Timer() as tm:
                res = fn(calls)
            prev = best.get(name)
            if prev is None or tm.cpu < prev[1]:
                best[name] = (tm.wall, tm.cpu, res)
    (ow, oc, old), (nw, nc, new) = best["per-fold loop"], best["batched"]
    diff = max(float(np.max(np.abs(a - b))) for a, b in zip(old, new, strict=True))
    print(f"powers, per-fold loop: wall {ow:.3f} s  cpu {oc:.3f} s  (best of {args.repeat})")
    print(f"powers, batched:       wall {nw:.3f} s  cpu {nc:.3f} s")
    print(f"ratio (loop / batched): wall {ow / nw:.1f}x  cpu {oc / nc:.1f}x")
    print(f"largest |power difference| over {folds} folds: {diff:.2e}")

    lam_folds = sum(len(a[3]) for a, _ in lam_calls)
    print(f"demo selection: {len(lam_calls)} fold sets, {lam_folds} per-fold lambda problems")
    best = {}
    for _ in range(args.repeat):
        for name, fn in (("per-fold loop", old_lambdas), ("batched", new_lambdas)):
            with Timer() as tm:
                res = fn(lam_calls)
            prev = best.get(name)
            if prev is None or tm.cpu < prev[1]:
                best[name] = (tm.wall, tm.cpu, res)
    (ow, oc, old), (nw, nc, new) = best["per-fold loop"], best["batched"]
    taken = np.isfinite(new)
    print(f"lambdas, per-fold loop: wall {ow:.3f} s  cpu {oc:.3f} s")
    print(
        f"lambdas, batched:       wall {nw:.3f} s  cpu {nc:.3f} s  ({int(taken.sum())} folds taken)"
    )
    print(f"ratio (loop / batched): wall {ow / nw:.1f}x  cpu {oc / nc:.1f}x")
    print(f"largest |lambda difference|: {float(np.max(np.abs(old[taken] - new[taken]))):.2e}")

    new_dyn = fastcv.Scorer._solve_dynamic
    new_all = fastcv.Scorer._powers_all_repeats
    new_lam = fastcv.fold_lambdas
    sel = {}
    for _ in range(args.repeat):
        for name, impl, pre, lam in (
            ("per-fold loop", per_fold_loop, lambda *a, **k: None, lambda *a: [None] * len(a[3])),
            ("batched", new_dyn, new_all, new_lam),
        ):
            fastcv.Scorer._solve_dynamic = impl
            fastcv.Scorer._powers_all_repeats = pre
            fastcv.fold_lambdas = lam
            try:
                with Timer() as tm:
                    body = demo_selection()
            finally:
                fastcv.Scorer._solve_dynamic = new_dyn
                fastcv.Scorer._powers_all_repeats = new_all
                fastcv.fold_lambdas = new_lam
            prev = sel.get(name)
            if prev is None or tm.cpu < prev[1]:
                sel[name] = (tm.wall, tm.cpu, body)
    (ow, oc, ob), (nw, nc, nb) = sel["per-fold loop"], sel["batched"]
    print(f"demo selection, per-fold loop: wall {ow:.2f} s  cpu {oc:.2f} s")
    print(f"demo selection, batched:       wall {nw:.2f} s  cpu {nc:.2f} s")
    print(f"ratio: wall {ow / nw:.2f}x  cpu {oc / nc:.2f}x")
    same = [e["specification"] for e in ob["ranking"]] == [
        e["specification"] for e in nb["ranking"]
    ]
    print(f"same ranking: {same}")
    rel, where = largest_change(nb["ranking"], ob["ranking"], "/ranking")
    print(f"largest relative change of a number in the ranking: {rel:.1e} ({where})")
    undo()
    stacked_selection(args.repeat)
    for n in args.rows:
        by_rows(n, args.repeat)
    for n in args.series:
        for k in args.series_k:
            series_rows(n, k, args.repeat)
    print("uptime:", subprocess.run(["uptime"], capture_output=True, text=True).stdout.strip())


if __name__ == "__main__":
    main()
