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
- per fold, every candidate's held-out predictions and training residuals come from one
  matrix product: the fold's solutions scattered into a (bank columns x C) matrix, times
  the bank's held-out and training rows (a bank with more than DENSE_COLUMNS columns per
  candidate column takes each candidate's own columns instead, by einsum);
- the smeared mean (Duan 1983) uses the same closed forms as :mod:`retransform` for the
  identity, the log and the square root (one or two means per candidate and fold; the
  square root by :func:`retransform.smear_sqrt` for all candidates at once); other inverses by
  :func:`retransform.smeared_means`, all candidates of a fold in one call;
- each fold's mean squared, absolute and relative errors are summed over its held-out rows
  for all candidates at once; fold errors and pooled errors (the folds' rows together, as
  :func:`cvresult.pooled_folds`) are formed from them by :func:`cvresult.error_of`.

A back-transform that is undefined or overflows on held-out rows is a cheap check: the
batch counts such rows per fold for the median and for the mean and fails the candidate
at the first in the one-candidate path's order (per repeat fold by fold, the median before
the mean; a candidate's mean is not formed after its median failed) with the same reason
text (:func:`fastcv.undefined_back_transform`: that fold and its number of rows).  Whatever else
the batch cannot settle exactly as the one-candidate path would (an ill-conditioned fold
that needs the exact QR refit, any other non-finite value, a fold too small for its
coefficients, an undefined MAPE) is handed to :meth:`Scorer.score` for that candidate
alone, so results and failure reasons are the one-candidate path's.  Tests compare the
two to 1e-10 relative and the failure reasons as text.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence

import numpy as np

from . import retransform
from . import transforms as tr
from .cvresult import METRICS, CVResult, error_of, std_errors_of, summaries_of
from .errors import CandidateFailure
from .fastcv import Scorer, undefined_back_transform
from .fitting import solve_batch

#: at most this many floats in one (n, C, p) stack of designs (about 64 MB)
STACK_FLOATS = 8_000_000
#: fitted values by one matrix product over all the bank's columns while the bank has at
#: most this many columns per candidate column (else from each candidate's own columns)
DENSE_COLUMNS = 8


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
    n = scorer.y.size
    dense = _dense(scorer)
    for p, members in by_size.items():
        # floats held at once: a dozen (n, C) arrays for one fold (fitted values, residuals,
        # their sorted copies and sums), and the designs (n, C, p) unless the bank is dense
        step = max(1, STACK_FLOATS // max(1, n * (12 if dense(p) else p + 12)))
        for s in range(0, len(members), step):
            part = members[s : s + step]
            got = _batch(scorer, t, [col_sets[i] for i in part])
            for i, res in zip(part, got, strict=True):
                out[i] = res if res is not None else _alone(scorer, t, col_sets[i], names[i])
    return [r for r in out if r is not None]


def _dense(scorer: Scorer) -> Callable[[int], bool]:
    """Whether candidates of p columns take their fitted values from one product over all
    the bank's columns (few bank columns per candidate column), not from their own."""
    m = scorer.bank.m
    return lambda p: m <= DENSE_COLUMNS * p


def _alone(
    scorer: Scorer, t: tr.Transform, cols: Sequence[int], names: list[str] | None
) -> CVResult | CandidateFailure:
    try:
        return scorer.score(t, list(cols), names)
    except CandidateFailure as exc:
        return exc


@np.errstate(over="ignore", invalid="ignore", divide="ignore")
def _batch(
    scorer: Scorer, t: tr.Transform, col_sets: Sequence[Sequence[int]]
) -> list[CVResult | CandidateFailure | None]:
    """Scores (or failures with their reason) of candidates with the same number of
    columns; None where the candidate must be scored alone."""
    bank, y, plan = scorer.bank, scorer.y, scorer.plan
    assert bank.G_fold is not None and bank.G_total is not None  # checked by batchable()
    index = bank.index
    X = bank.X
    assert X is not None  # a frozen bank
    C = len(col_sets)
    S = np.asarray(col_sets, dtype=np.intp)  # (C, p)
    p = S.shape[1]
    K, R = plan.folds, plan.repeats
    t0, z, finite = scorer.fixed_response(t)
    if not finite or any(rows.size <= p for tr_r in index.train for rows in tr_r):
        return [None] * C  # the one-candidate path raises the right reason
    # a repeated column makes the system singular: the one-candidate path says why
    alone = np.any(np.diff(np.sort(S, axis=1), axis=1) == 0, axis=1)
    failed: list[CandidateFailure | None] = [None] * C  # undefined back-transform, as alone
    gone = np.zeros(C, dtype=bool)  # failed: nothing after that fold counts
    dense = _dense(scorer)(p)
    XS = None if dense else X[:, S]  # (n, C, p): a wide bank's candidates use few columns
    cf, ctot = bank.cross(t, z)
    fold_vals = np.empty((C, R * K))
    pooled = {name: np.empty((C, R)) for name in METRICS}
    kind = retransform.closed_form(t0)
    shift = retransform.log_shift(t0)
    cand = np.arange(C)
    for r in range(R):
        test, train = index.test[r], index.train[r]
        Gtr = bank.G_total[r][None] - bank.G_fold[r]  # (K, m, m)
        G = Gtr[:, S[:, :, None], S[:, None, :]]  # (K, C, p, p)
        c = (ctot[r][None, :] - cf[r])[:, S]  # (K, C, p)
        B, ok = solve_batch(
            np.swapaxes(G, 0, 1).reshape(C * K, p, p), np.swapaxes(c, 0, 1).reshape(C * K, p)
        )
        B = B.reshape(C, K, p)
        alone |= ~ok.reshape(C, K).all(axis=1) & ~gone  # the exact QR refit: alone
        B = np.where(np.isfinite(B), B, 0.0)
        settled = alone | gone
        # each fold's mean squared, absolute and relative error (K, C), and its row count
        means = np.empty((3, K, C))
        sizes = np.array([te.size for te in test], dtype=float)
        bad_med = np.zeros((K, C), dtype=np.intp)
        bad_mean = np.zeros((K, C), dtype=np.intp)
        med_failed = np.zeros(C, dtype=bool)
        for k in range(K):
            te, trn = test[k], train[k]
            Bk = B[:, k, :]
            W = None
            if XS is None:  # every candidate's solution as a column over the bank: one product
                W = np.zeros((bank.m, C))
                W[S, cand[:, None]] = Bk
            eta = _fitted(X, W, XS, Bk, te)  # (held-out rows, C)
            med = t0.inverse(eta)
            bad_med[k] = _not_finite(med)
            med_failed |= bad_med[k] > 0
            if kind == "identity":  # mean(e) = (sum z - sum of fitted values) / n_tr
                fitted_sum = _fitted(X, W, XS, Bk, trn, summed=True)
                mean = eta + (z[trn].sum() - fitted_sum) / trn.size
                bad_mean[k] = _not_finite(mean)
                _add_errors(means, k, y[te], med, mean)
                continue
            e = _fitted(X, W, XS, Bk, trn)  # training residuals (n_tr, C)
            np.subtract(z[trn, None], e, out=e)
            if kind == "log":  # exp(eta) is the median itself when nothing is shifted
                grow = med if shift == 0.0 else np.exp(eta)
                mean = grow * retransform.log_smear_factor(e) - shift
            elif kind == "sqrt":  # mean_i max(eta + e_i, 0)^2, all candidates at once
                mean = retransform.smear_sqrt(eta, e)
            else:  # every candidate still in play in one call (power forms together)
                mean = np.full(eta.shape, np.nan)
                js = np.flatnonzero(~(settled | med_failed))
                if js.size:
                    mean[:, js] = retransform.smeared_means(
                        [t0] * js.size, eta[:, js].T, e[:, js].T
                    ).T
            bad_mean[k] = _not_finite(mean)
            _add_errors(means, k, y[te], med, mean)
        _fail_undefined(t0, bad_med, bad_mean, settled, gone, failed)
        pc = means[2] if scorer.want_mape else None
        fold_vals[:, r * K : (r + 1) * K] = error_of(
            plan.metric, means[0][None], means[1][None], None if pc is None else pc[None]
        ).T
        for name in pooled:  # the folds' rows together (cvresult.pooled_folds)
            pooled[name][:, r] = error_of(name, means[0], means[1], pc, weights=sizes)
    alone |= ~np.all(np.isfinite(fold_vals), axis=1) & ~gone
    summaries = summaries_of(
        pooled["rmse"], pooled["mae"], pooled["mape"] if scorer.want_mape else None
    )
    std_errors = std_errors_of(fold_vals, K).tolist()
    out: list[CVResult | CandidateFailure | None] = []
    for j in range(C):
        reason = failed[j]
        if reason is not None:
            out.append(reason)
            continue
        summary = summaries[j]
        value = summary.of(plan.metric)
        if alone[j] or value is None or not math.isfinite(value):
            out.append(None)
            continue
        out.append(CVResult(plan.metric, value, std_errors[j], fold_vals[j].copy(), summary))
    return out


def _fitted(
    X: np.ndarray,
    W: np.ndarray | None,
    XS: np.ndarray | None,
    Bk: np.ndarray,
    rows: np.ndarray,
    summed: bool = False,
) -> np.ndarray:
    """Every candidate's fitted values on ``rows`` (rows, C), or their sums over the rows
    (C,): from the solutions scattered over the bank's columns (``W``) or, for a wide bank,
    from the candidates' own columns (``XS`` (n, C, p), solutions ``Bk`` (C, p))."""
    out: np.ndarray
    if W is not None:
        out = X[rows].sum(axis=0) @ W if summed else X[rows] @ W
    else:
        assert XS is not None
        out = np.einsum("ncp,cp->c" if summed else "ncp,cp->nc", XS[rows], Bk)
    return out


def _not_finite(v: np.ndarray) -> np.ndarray:
    """Non-finite entries of every column of ``v`` (rows, C); a column sum is finite
    exactly when the column is (short of overflow, which the count settles)."""
    out = np.zeros(v.shape[1], dtype=np.intp)
    bad = np.flatnonzero(~np.isfinite(v.sum(axis=0)))
    if bad.size:
        out[bad] = np.count_nonzero(~np.isfinite(v[:, bad]), axis=0)
    return out


def _add_errors(
    means: np.ndarray, k: int, yt: np.ndarray, med: np.ndarray, mean: np.ndarray
) -> None:
    """Fold k's mean squared error of the smeared means and mean absolute and absolute
    relative errors of the medians, every candidate (column) at once, into means[:, k]."""
    d = yt[:, None] - mean
    means[0, k] = np.einsum("ij,ij->j", d, d) / yt.size
    dm = np.abs(yt[:, None] - med)
    means[1, k] = dm.sum(axis=0) / yt.size
    means[2, k] = (1.0 / np.abs(yt)) @ dm / yt.size


def _fail_undefined(
    t0: tr.Transform,
    bad_med: np.ndarray,
    bad_mean: np.ndarray,
    settled: np.ndarray,
    gone: np.ndarray,
    failed: list[CandidateFailure | None],
) -> None:
    """Fail every candidate not yet settled whose back-transform is not finite on some
    held-out row, with the one-candidate path's reason: the first fold where the median
    (``bad_med`` (K, C): rows per fold and candidate) or else the smeared mean
    (``bad_mean``) is undefined."""
    K = bad_med.shape[0]
    # fold k's median check comes before its mean: event 2k, then 2k + 1
    events = np.stack([bad_med > 0, bad_mean > 0], axis=1).reshape(2 * K, -1)
    hit = events.any(axis=0) & ~settled
    for j in np.flatnonzero(hit).tolist():
        ev = int(np.argmax(events[:, j]))
        k = ev // 2
        count = bad_med[k, j] if ev % 2 == 0 else bad_mean[k, j]
        failed[j] = undefined_back_transform(t0, k, int(count))
        gone[j] = True
