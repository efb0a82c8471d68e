"""Benchmark (run by hand): the practitioner grid's batched scoring as it was before the
per-fold products, patched back in, against the engine as shipped, alternating in one run.

"before" puts back, by patching:

- ``batchcv._batch`` forming every row's fitted value under every fold's
  solution from an (n, C, p) stack of designs (einsum), the training residuals by boolean
  masks, fold errors row by row and each candidate's summary and standard error alone;
- ``retransform.smear_sqrt`` counting the cut-off terms column by column (one
  ``searchsorted`` per column) and ``retransform.log_smear_factor`` always shifting;
- the exhaustive search's batches of 64 candidates at 1M rows x splits x candidates
  (``search.GRID_BATCH`` / ``GRID_WORK``);
- ``Specification.simplicity`` hashing the key's transforms on every ask.

In both columns: the ranking's paired standard errors in one call.

Parts timed: the 500 candidates of the grid of ``tests/benchmarks/naive_loop.py`` (3,000
rows, 3 positive predictors, 4 response x 5^3 predictor scales, 5 folds) scored by
``batchcv.score_many``, one call per response scale; and the grid's selection in process
(``run_selection`` then ``to_jsonable``, as every exit makes it).  Prints best-of-``--runs``
CPU seconds (``time.process_time``) beside wall seconds (the machine is shared), the ratio,
the largest relative difference of the CV errors (scoring) and of any number in the two
selection bodies (checksums aside).

    python tests/benchmarks/grid_engine.py [--runs 5]
"""

from __future__ import annotations

import argparse
import math
import os
import sys
from contextlib import contextmanager

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", ".."))

from tests.benchmarks._common import machine, pin_blas

pin_blas(1)

import numpy as np
from service.api.encode import to_jsonable
from service.api.options import selection_job, service
from service.api.schemas import SelectionRequest
from service.core import batchcv, retransform, spec
from service.core import transforms as tr
from service.core.cvresult import METRICS, CVResult, error_of, std_error_of, summary_of
from service.core.errors import CandidateFailure
from service.core.fastcv import undefined_back_transform
from service.core.fitting import solve_batch
from service.selection import search
from service.selection.request import run_selection
from tests.benchmarks.batch_scoring import RESP, grid_scorer
from tests.benchmarks.engine import compare, grid_body


@np.errstate(over="ignore", invalid="ignore", divide="ignore")  # as batchcv._batch
def _batch_before(scorer, t, col_sets):
    bank, y, plan = scorer.bank, scorer.y, scorer.plan
    index, X = bank.index, bank.X
    C = len(col_sets)
    S = np.asarray(col_sets, dtype=np.intp)
    p = S.shape[1]
    n, K, R = y.size, plan.folds, plan.repeats
    t0, z, finite = scorer.fixed_response(t)
    if not finite or any(rows.size <= p for tr_r in index.train for rows in tr_r):
        return [None] * C
    alone = np.zeros(C, dtype=bool)
    failed = [None] * C
    gone = np.zeros(C, dtype=bool)
    XS = X[:, S]
    cf, ctot = bank.cross(t, z)
    fold_vals = np.empty((C, R * K))
    pooled = {name: np.empty((C, R)) for name in METRICS}
    kind = retransform.closed_form(t0)
    for r in range(R):
        a = np.asarray(plan.assignments[r], dtype=np.intp)
        test = index.test[r]
        Gtr = bank.G_total[r][None] - bank.G_fold[r]
        G = Gtr[:, S[:, :, None], S[:, None, :]]
        c = (ctot[r][None, :] - cf[r])[:, S]
        B, ok = solve_batch(
            np.swapaxes(G, 0, 1).reshape(C * K, p, p), np.swapaxes(c, 0, 1).reshape(C * K, p)
        )
        B = B.reshape(C, K, p)
        alone |= ~ok.reshape(C, K).all(axis=1) & ~gone
        B = np.where(np.isfinite(B), B, 0.0)
        fitted = np.einsum("ncp,ckp->knc", XS, B)
        eta = fitted[a, np.arange(n), :]
        med = t0.inverse(eta)
        mean = np.empty((n, C))
        for k in range(K):
            te = test[k]
            _fail_before(t0, k, med[te], alone | gone, gone, failed)
            train_rows = a != k
            e = z[train_rows, None] - fitted[k][train_rows]
            if kind == "identity":
                mean[te] = eta[te] + e.mean(axis=0)
            elif kind == "log":
                m = retransform.log_smear_factor(e)
                mean[te] = np.exp(eta[te]) * m - retransform.log_shift(t0)
            elif kind == "sqrt":
                mean[te] = retransform.smear_sqrt(eta[te], e)
            else:
                js = np.flatnonzero(~(alone | gone))
                if js.size:
                    mean[np.ix_(te, js)] = retransform.smeared_means(
                        [t0] * js.size, eta[te][:, js].T, e[:, js].T
                    ).T
            _fail_before(t0, k, mean[te], alone | gone, gone, failed)
        d = y[:, None] - mean
        sq = d * d
        ab = np.abs(y[:, None] - med)
        pc = np.abs((y[:, None] - med) / y[:, None]) if scorer.want_mape else None
        for k in range(K):
            te = test[k]
            fold_vals[:, r * K + k] = error_of(
                plan.metric, sq[te], ab[te], None if pc is None else pc[te]
            )
        for name in pooled:
            pooled[name][:, r] = error_of(name, sq, ab, pc)
    alone |= ~np.all(np.isfinite(fold_vals), axis=1) & ~gone
    out = []
    for j in range(C):
        if failed[j] is not None:
            out.append(failed[j])
            continue
        if alone[j]:
            out.append(None)
            continue
        summary = summary_of(
            pooled["rmse"][j], pooled["mae"][j], pooled["mape"][j] if scorer.want_mape else None
        )
        value = summary.of(plan.metric)
        if value is None or not math.isfinite(value):
            out.append(None)
            continue
        fv = fold_vals[j].copy()
        out.append(CVResult(plan.metric, value, std_error_of(fv, K), fv, summary))
    return out


def _fail_before(t0, k, values, settled, gone, failed):
    bad = (~np.isfinite(values)).sum(axis=0)
    for j in np.flatnonzero((bad > 0) & ~settled).tolist():
        failed[j] = undefined_back_transform(t0, k, int(bad[j]))
        gone[j] = True


def _smear_sqrt_before(eta, e):
    one = e.ndim == 1
    E = e[:, None] if one else e
    H = eta[:, None] if one else eta
    n = E.shape[0]
    out = H * H + 2.0 * H * E.mean(axis=0) + (E * E).mean(axis=0)
    cut = ~(H + E.min(axis=0) > 0)
    cols = np.flatnonzero(cut.any(axis=0))
    if cols.size:
        es = np.sort(E[:, cols], axis=0)
        zero = np.zeros((1, cols.size))
        s1 = np.concatenate([np.cumsum(es[::-1], axis=0)[::-1], zero])
        s2 = np.concatenate([np.cumsum((es * es)[::-1], axis=0)[::-1], zero])
        for i, j in enumerate(cols.tolist()):
            rows = np.flatnonzero(cut[:, j])
            x = H[rows, j]
            k = np.searchsorted(es[:, i], -x, side="right")
            out[rows, j] = ((n - k) * x * x + 2.0 * x * s1[k, i] + s2[k, i]) / n
    return out[:, 0] if one else out


def _log_smear_factor_before(e):
    top = np.max(e, axis=0)
    return np.mean(np.exp(e - top), axis=0) * np.exp(top)


def _simplicity_before(self):
    return spec._simplicity(self.key)


@contextmanager
def before():
    saved = (
        batchcv._batch,
        retransform.smear_sqrt,
        retransform.log_smear_factor,
        search.GRID_BATCH,
        search.GRID_WORK,
        spec.Specification.simplicity,
    )
    batchcv._batch = _batch_before
    retransform.smear_sqrt = _smear_sqrt_before
    retransform.log_smear_factor = _log_smear_factor_before
    search.GRID_BATCH, search.GRID_WORK = 64, 1_000_000
    spec.Specification.simplicity = _simplicity_before
    try:
        yield
    finally:
        (
            batchcv._batch,
            retransform.smear_sqrt,
            retransform.log_smear_factor,
            search.GRID_BATCH,
            search.GRID_WORK,
            spec.Specification.simplicity,
        ) = saved


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--runs", type=int, default=5)
    args = ap.parse_args()
    print(machine())
    _, sets, scorer = grid_scorer(3000)

    def scoring():
        values = []
        for name in RESP:
            got = batchcv.score_many(scorer, tr.Transform(name), sets, [None] * len(sets))
            values += [g.value if not isinstance(g, CandidateFailure) else math.nan for g in got]
        return np.array(values)

    with before():
        old = scoring()
    new = scoring()
    ok = ~np.isnan(old)
    same = bool(np.array_equal(ok, ~np.isnan(new)))
    print(
        f"grid scoring: same failures {same}; largest relative CV difference "
        f"{np.max(np.abs(new[ok] / old[ok] - 1)):.1e}"
    )
    compare("grid scoring (500 candidates, batchcv.score_many)", scoring, args.runs, before)
    body = grid_body()

    def grid():
        job = selection_job(SelectionRequest.model_validate(body))
        return to_jsonable(run_selection(job, service()))

    compare("practitioner grid selection, in process", grid, args.runs, before)


if __name__ == "__main__":
    main()
