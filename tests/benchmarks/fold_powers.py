"""Benchmark (run by hand): estimated predictor powers in every training fold, the per-fold
loop (one ``estimate_powers`` per fold, each fold's cross-products from its rows, then one
solve per fold) against the batched path (``estimate_fold_powers``: fixed cross-products
downdated from the column bank, all folds' Gauss-Newton steps in one stacked solve).

Both run in the same process on the same problems: every per-fold power problem the demo
selection (service/demo, default options) poses is recorded, then solved by each path.
The demo selection itself is also timed end to end with each path.  Prints the machine
load (``uptime``), wall and CPU seconds (time.process_time; the machine is shared, so CPU
time is the steadier number), the ratios, and the largest difference between the powers.

    python tests/benchmarks/fold_powers.py [--repeat 3]
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
from service.core.errors import CandidateFailure
from service.core.fitting import solve_batch


def per_fold_loop(self, S, XS, dyn, r, zs, per_fold, t, names, B, designs, powers, fits=None):
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
        designs[k] = X
        Xtr = X[rows]
        b, ok = solve_batch((Xtr.T @ Xtr)[None], (Xtr.T @ ztr)[None])
        if ok[0]:
            B[k] = b[0]
        else:
            B[k] = fastcv._exact_refit(Xtr, ztr, names, k)
            refits += 1
    return refits


def demo_selection():
    from service.api.schemas import SelectionRequest
    from service.api.selection import run_selection_request
    from service.demo import demo_request

    return run_selection_request(SelectionRequest.model_validate(demo_request()))


def record_problems():
    """Every call the demo selection makes to estimate_fold_powers (arguments kept)."""
    calls = []
    real = bt.estimate_fold_powers

    def spy(*args, **kw):
        calls.append((args, kw))
        return real(*args, **kw)

    fastcv.estimate_fold_powers = spy
    try:
        demo_selection()
    finally:
        fastcv.estimate_fold_powers = real
    return calls


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


def ranking(body):
    return [e["specification"] for e in body["ranking"]], [
        e["cv"]["value"] if "cv" in e and isinstance(e["cv"], dict) and "value" in e["cv"] else None
        for e in body["ranking"]
    ]


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--repeat", type=int, default=3)
    args = ap.parse_args()
    print("uptime:", subprocess.run(["uptime"], capture_output=True, text=True).stdout.strip())
    print(machine())
    calls = record_problems()
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

    new_dyn = fastcv.Scorer._solve_dynamic
    new_all = fastcv.Scorer._powers_all_repeats
    sel = {}
    for _ in range(args.repeat):
        for name, impl, pre in (
            ("per-fold loop", per_fold_loop, lambda *a, **k: None),
            ("batched", new_dyn, new_all),
        ):
            fastcv.Scorer._solve_dynamic = impl
            fastcv.Scorer._powers_all_repeats = pre
            try:
                with Timer() as tm:
                    body = demo_selection()
            finally:
                fastcv.Scorer._solve_dynamic = new_dyn
                fastcv.Scorer._powers_all_repeats = new_all
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
    print("uptime:", subprocess.run(["uptime"], capture_output=True, text=True).stdout.strip())


if __name__ == "__main__":
    main()
