"""Score many candidates that share a response scale in one batch.

:meth:`fastcv.Scorer.score` handles one candidate: per repeat a stacked solve of its K
training systems, then a Python loop over the folds for the back-transform and the fold
error.  A search scores hundreds of candidates that differ only in which bank columns they
use, so most of that time is Python overhead per candidate and fold, not arithmetic.
:func:`score_many` does the same computation for a whole group of candidates with the same
number of columns and a response scale fixed across folds:

- the C x K training systems (sub-blocks of the bank's downdated cross-products) are
  solved in one call of :func:`fitting.solve_batch` (same column scaling, condition check
  and Cholesky as the one-candidate path);
- every row's held-out prediction and every row's residual under every fold's solution
  come from a few einsum products over the (n, C, p) stacked designs;
- the smeared mean (Duan 1983) uses the same closed forms as :mod:`retransform` for the
  identity, the log and the square root (one or two means per candidate and fold; the
  square root by :func:`retransform.smear_sqrt` for all candidates at once); other inverses by
  :func:`retransform.smeared_means`, all candidates of a fold in one call;
- fold errors and pooled errors are reduced in numpy.

A back-transform that is undefined or overflows on held-out rows is a cheap check: the
batch goes through the folds in the one-candidate path's order (per repeat the median
check, then the mean, fold by fold) and fails the candidate with the same reason text
(:func:`fastcv.undefined_back_transform`: the first such fold and its number of rows).  Whatever else
the batch cannot settle exactly as the one-candidate path would (an ill-conditioned fold
that needs the exact QR refit, any other non-finite value, a fold too small for its
coefficients, an undefined MAPE) is handed to :meth:`Scorer.score` for that candidate
alone, so results and failure reasons are the one-candidate path's.  Tests compare the
two to 1e-10 relative and the failure reasons as text.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from . import retransform
from . import transforms as tr
from .cvresult import METRICS, CVResult, error_of, std_error_of, summary_of
from .errors import CandidateFailure
from .fastcv import Scorer, undefined_back_transform
from .fitting import solve_batch

#: at most this many floats in one (n, C, p) stack of designs (about 64 MB)
STACK_FLOATS = 8_000_000


def batchable(scorer: Scorer, t: tr.Transform) -> bool:
    """True when candidates on response scale ``t`` can be scored together: the scale is
    the same in every fold (nothing estimated per fold) and the bank keeps its per-fold
    cross-products."""
    return (
        not scorer.per_fold_response(t)
        and scorer.bank.G_total is not None
        and (scorer.plan.metric != "mape" or scorer.want_mape)
    )


def score_many(
    scorer: Scorer,
    t: tr.Transform,
    col_sets: Sequence[Sequence[int]],
    names: Sequence[list[str] | None],
) -> list[CVResult | CandidateFailure]:
    """:meth:`Scorer.score` for each candidate (bank columns ``col_sets[c]``, column names
    ``names[c]``) on response scale ``t``; a :class:`CandidateFailure` in place of a
    candidate that fails.  Candidates of different sizes are batched by size."""
    out: list[CVResult | CandidateFailure | None] = [None] * len(col_sets)
    if not batchable(scorer, t):
        return [_alone(scorer, t, c, nm) for c, nm in zip(col_sets, names, strict=True)]
    by_size: dict[int, list[int]] = {}
    for i, cols in enumerate(col_sets):
        by_size.setdefault(len(cols), []).append(i)
    n, K = scorer.y.size, scorer.plan.folds
    for p, members in by_size.items():
        # floats held at once: designs (n C p), fitted values (K n C), a dozen (n, C) arrays
        step = max(1, STACK_FLOATS // max(1, n * (p + K + 12)))
        for s in range(0, len(members), step):
            part = members[s : s + step]
            got = _batch(scorer, t, [col_sets[i] for i in part])
            for i, res in zip(part, got, strict=True):
                out[i] = res if res is not None else _alone(scorer, t, col_sets[i], names[i])
    return [r for r in out if r is not None]


def _alone(
    scorer: Scorer, t: tr.Transform, cols: Sequence[int], names: list[str] | None
) -> CVResult | CandidateFailure:
    try:
        return scorer.score(t, list(cols), names)
    except CandidateFailure as exc:
        return exc


def _batch(
    scorer: Scorer, t: tr.Transform, col_sets: Sequence[Sequence[int]]
) -> list[CVResult | CandidateFailure | None]:
    """Scores (or failures with their reason) of candidates with the same number of
    columns; None where the candidate must be scored alone."""
    with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
        return _batch_unguarded(scorer, t, col_sets)


def _batch_unguarded(
    scorer: Scorer, t: tr.Transform, col_sets: Sequence[Sequence[int]]
) -> list[CVResult | CandidateFailure | None]:
    bank, y, plan = scorer.bank, scorer.y, scorer.plan
    assert bank.G_fold is not None and bank.G_total is not None  # checked by batchable()
    index = bank.index
    X = bank.X
    assert X is not None  # a frozen bank
    C = len(col_sets)
    S = np.asarray(col_sets, dtype=np.intp)  # (C, p)
    p = S.shape[1]
    n, K, R = y.size, plan.folds, plan.repeats
    t0, z, finite = scorer.fixed_response(t)
    if not finite or any(rows.size <= p for tr_r in index.train for rows in tr_r):
        return [None] * C  # the one-candidate path raises the right reason
    alone = np.zeros(C, dtype=bool)
    failed: list[CandidateFailure | None] = [None] * C  # undefined back-transform, as alone
    gone = np.zeros(C, dtype=bool)  # failed: nothing after that fold counts
    XS = X[:, S]  # (n, C, p)
    cf, ctot = bank.cross(t, z)
    fold_vals = np.empty((C, R * K))
    pooled = {name: np.empty((C, R)) for name in METRICS}
    kind = retransform.closed_form(t0)
    for r in range(R):
        a = np.asarray(plan.assignments[r], dtype=np.intp)
        test = index.test[r]
        Gtr = bank.G_total[r][None] - bank.G_fold[r]  # (K, m, m)
        G = Gtr[:, S[:, :, None], S[:, None, :]]  # (K, C, p, p)
        c = (ctot[r][None, :] - cf[r])[:, S]  # (K, C, p)
        B, ok = solve_batch(
            np.swapaxes(G, 0, 1).reshape(C * K, p, p), np.swapaxes(c, 0, 1).reshape(C * K, p)
        )
        B = B.reshape(C, K, p)
        alone |= ~ok.reshape(C, K).all(axis=1) & ~gone  # the exact QR refit: alone
        B = np.where(np.isfinite(B), B, 0.0)
        # fitted value of every row under every fold's solution, (K, n, C)
        fitted = np.einsum("ncp,ckp->knc", XS, B)
        eta = fitted[a, np.arange(n), :]  # (n, C): each row under its own fold's solution
        med = t0.inverse(eta)
        mean = np.empty((n, C))
        for k in range(K):
            te = test[k]
            # an undefined median ends the candidate before its smearing (as one at a time)
            _fail_undefined(t0, k, med[te], alone | gone, gone, failed)
            train_rows = a != k
            e = z[train_rows, None] - fitted[k][train_rows]  # training residuals (n_tr, C)
            if kind == "identity":
                mean[te] = eta[te] + e.mean(axis=0)
            elif kind == "log":
                m = retransform.log_smear_factor(e)
                mean[te] = np.exp(eta[te]) * m - retransform.log_shift(t0)
            elif kind == "sqrt":  # mean_i max(eta + e_i, 0)^2, all candidates at once
                mean[te] = retransform.smear_sqrt(eta[te], e)
            else:  # every candidate still in the batch in one call (power forms together)
                js = np.flatnonzero(~(alone | gone))
                if js.size:
                    mean[np.ix_(te, js)] = retransform.smeared_means(
                        [t0] * js.size, eta[te][:, js].T, e[:, js].T
                    ).T
            _fail_undefined(t0, k, mean[te], alone | gone, gone, failed)
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
    out: list[CVResult | CandidateFailure | None] = []
    for j in range(C):
        reason = failed[j]
        if reason is not None:
            out.append(reason)
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


def _fail_undefined(
    t0: tr.Transform,
    k: int,
    values: np.ndarray,
    settled: np.ndarray,
    gone: np.ndarray,
    failed: list[CandidateFailure | None],
) -> None:
    """Fail every candidate not yet settled with a non-finite back-transform among fold
    k's held-out ``values`` (rows, C), with the one-candidate path's reason."""
    bad = (~np.isfinite(values)).sum(axis=0)
    for j in np.flatnonzero((bad > 0) & ~settled).tolist():
        failed[j] = undefined_back_transform(t0, k, int(bad[j]))
        gone[j] = True
