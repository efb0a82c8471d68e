"""Score one candidate from a column bank: per-fold solutions, back-transforms, original-scale errors.

Per split (repeat r, fold k) the training least-squares solution comes from
the bank's cross-product matrices (sub-block of G_r - G_rk, see bank.py): the
columns are scaled to unit length, the scaled matrix's condition number is
checked (below 1e7 Cholesky keeps about nine digits), and a split that fails
the check is refitted exactly on its rows by pivoted QR (which also reports
rank deficiency).  All K solutions of a repeat are solved at once and the
fitted values of all rows for all folds come from one matrix product.

Back-transforms on the held-out rows: the smeared mean (Duan 1983) for rmse,
the naive inverse (a median) for mae and mape, by :func:`retransform.smeared_mean`:
closed forms in O(n) for identity, log and square root; binomial series over bins
of the sorted residuals with a stated error bound for the power-type inverses
(square, reciprocal, power, Box-Cox) and both branches of Yeo-Johnson.

Things estimated from the response are estimated inside every training fold:
a Box-Cox / Yeo-Johnson lambda (profile likelihood on the fold's design,
warm-started at the all-rows estimate), the shift of a log when the response
has zeros, and estimated predictor powers (Box-Tidwell on the fold's rows,
started at the all-rows estimate; the column then differs per fold).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
from typing import TYPE_CHECKING

import numpy as np

from . import retransform
from . import transforms as tr
from .bank import ColumnBank
from .boxtidwell import (
    FoldPowerProblem,
    PowerFit,
    _power_w_into,
    estimate_fold_powers,
    estimate_fold_powers_by_series,
    estimate_many_fold_powers,
    estimate_powers,
    power_w_stacked,
)
from .cvresult import (
    METRICS,
    CVResult,
    Dynamic,
    OutOfFold,
    error_of,
    std_error_of,
    summary_of,
)
from .errors import CandidateFailure
from .fitting import qr_solve, solve_batch
from .likelihood import (
    FoldLambdaProblem,
    fit_transform,
    fold_lambdas,
    many_fold_lambdas,
    many_lambdas,
)
from .numbers import count_of

if TYPE_CHECKING:  # pragma: no cover
    from .folds import CVPlan

# Folds x rows up to which the folds' powers / lambdas are estimated in one batch.  The
# batched paths save Python-level calls and spend arithmetic on held-out rows (masked), so
# they win on small tables and lose on large ones; crossovers measured with
# tests/benchmarks/fold_powers.py --rows N (one thread, 10 folds): powers ~5,000 rows,
# lambdas ~3,000 rows.  Above these the folds are taken one by one (powers: every fold's
# steps from series cross-products, boxtidwell.estimate_fold_powers_by_series, when the
# response is the same in every fold).
POWER_BATCH_CELLS = 50_000
LAMBDA_BATCH_CELLS = 25_000
#: folds x rows above which a candidate with estimated powers builds, sums and applies one
#: fold's training sums without any fold's whole design (Scorer._solve_dynamic_by_fold)
#: instead of all folds' designs as masked (K, n, p) products, which pass over held-out
#: rows and hold K n p arrays several times: measured by hand, one thread, 5 folds, 4 fixed
#: columns and 2 powers, a million rows: 0.86-1.09 -> 0.46-0.50 s CPU and 649 -> 216 MB of
#: peak traced allocations per candidate (tests/benchmarks/rows.py --compare-designs for
#: the whole search)
BY_FOLD_DESIGN_CELLS = POWER_BATCH_CELLS
#: all-rows lambdas of at least this many designs are found in one stacked search; fewer
#: one by one (the stacked bounded Brent costs ~17 ms of numpy calls whatever the number
#: of designs, the one-design search 4-6 ms each at 300-2,000 rows: measured by hand)
STACKED_LAMBDAS_MIN = 6
#: at most this many floats of stacked fold designs at once in Scorer.score_many (64 MB)
_STACK_FLOATS = 8_000_000
#: at most this many floats of candidates' held-out predictions and training residuals
#: at once in Scorer.score_many (64 MB; every candidate at 300 or 2,000 rows, 13 at 100,000,
#: one at a time at a million)
_HELD_FLOATS = 8_000_000


def _exact_refit(
    X_tr: np.ndarray, z_tr: np.ndarray, names: list[str] | None, k: int | np.intp
) -> np.ndarray:
    """Pivoted-QR refit of one fold (columns first divided by their largest magnitude, so
    their sums of squares stay finite for values near the float limits)."""
    m = np.max(np.abs(X_tr), axis=0)
    m = np.where((m > 0) & np.isfinite(m), m, 1.0)
    try:
        coef, _, _ = qr_solve(X_tr / m, z_tr, names, with_condition=False)
    except CandidateFailure as exc:
        raise CandidateFailure(f"fold {k + 1}: {exc.reason}") from None
    except (np.linalg.LinAlgError, ValueError):
        raise CandidateFailure(
            f"fold {k + 1}: the least-squares problem has no finite "
            "solution (values too large for floating point)"
        ) from None
    return coef / m


def _solve_or_refit(
    G: np.ndarray,
    c: np.ndarray,
    B: np.ndarray,
    fold: Callable[[int], tuple[np.ndarray, np.ndarray]],
    names: list[str] | None,
) -> int:
    """B[k] = the solution of the stacked normal equations G[k] b = c[k], or where the
    stack's condition check refuses fold k, its pivoted-QR refit (:func:`_exact_refit` of
    ``fold(k)``: that fold's training design and response); returns how many were refit."""
    Bk, ok = solve_batch(G, c)
    B[:] = Bk
    refit = np.flatnonzero(~ok).tolist()
    for k in refit:
        B[k] = _exact_refit(*fold(k), names, k)
    return len(refit)


def undefined_back_transform(t: tr.Transform, k: int, count: int) -> CandidateFailure:
    """The failure of a candidate whose back-transform is undefined for ``count`` held-out
    rows of fold k (0-based); the batch fails candidates with the same words."""
    return CandidateFailure(
        f"fold {k + 1}: the back-transform of {t.label('y')} is undefined or overflows for "
        f"{count_of(count, 'held-out row')} (prediction outside the scale's range)"
    )


@dataclass(frozen=True)
class Found:
    """What a batch over many candidates found for one candidate's training folds, for
    :meth:`Scorer.score` to use instead of finding it again: every repeat's fold powers
    (``powers[r][k]``), or the all-rows lambda ``near`` and the folds' lambdas of all
    repeats (``lambdas[r K + k]``, None where the one-fold path answers)."""

    powers: list[list[PowerFit]] | None = None
    near: float | None = None
    lambdas: list[float | None] | None = None


#: one candidate for the scorer: (response transform, bank columns, column names, estimated
#: predictor powers or None, all-rows estimates found or None)
Item = tuple[tr.Transform, list[int], list[str] | None, Dynamic | None, Found | None]


def _fitted(designs: list[np.ndarray], B: np.ndarray) -> np.ndarray:
    """(n, K): every row's fitted value under every fold's solution, fold k on its own
    design ``designs[k]`` (n, p)."""
    X = np.stack(designs)
    out: np.ndarray = np.einsum("knp,kp->nk", X, B)
    return out


@dataclass
class _HeldOut:
    """One fold's held-out side: repeat ``r``, held-out rows ``test``, the fold's concrete
    scale ``t``, predictions ``eta`` on the model scale, training residuals ``e``, the naive
    inverse ``median`` and (once smeared) the smeared ``mean``."""

    r: int
    test: np.ndarray
    t: tr.Transform
    eta: np.ndarray
    e: np.ndarray
    median: np.ndarray
    mean: np.ndarray | None = None


@dataclass
class _Pending:
    """A candidate's folds up to the back-transform (:meth:`Scorer._held_out`), with what
    its CVResult carries besides the errors."""

    folds: list[_HeldOut]
    repeats: int
    lambdas: list[float]
    powers: list[list[float]]
    refits: int
    oof: OutOfFold | None


class Scorer:
    """Scores candidates that share one bank, one plan and one response column."""

    def __init__(self, bank: ColumnBank, y: np.ndarray, plan: CVPlan, shift_needed: bool):
        self.bank = bank
        self.y = np.asarray(y, dtype=float)
        self.plan = plan
        self.shift_needed = shift_needed
        self._resp: dict[tr.Transform, tuple[tr.Transform, np.ndarray, bool]] = {}
        self.want_mape = bool(np.all(self.y != 0))
        # all-rows lambdas (family, bank columns) -> lambda or why it has none: the warm
        # start of the folds' estimates, asked for again by out_of_fold and a second search
        self._near: dict[tuple[str, tuple[int, ...]], float | ValueError] = {}
        # the training folds' X'X of bank columns S in repeat r, asked for by every
        # candidate with those columns (read-only: callers share them)
        self._grams: dict[tuple[bytes, int], np.ndarray] = {}

    def train_grams(self, S: np.ndarray, r: int) -> np.ndarray:
        """:meth:`ColumnBank.train_grams` (K, p, p), formed once per (columns, repeat)."""
        key = (np.asarray(S, dtype=np.intp).tobytes(), r)
        got = self._grams.get(key)
        if got is None:
            got = self.bank.train_grams(S, r)
            got.setflags(write=False)
            self._grams[key] = got
        return got

    def all_rows_lambdas(
        self, items: Sequence[tuple[tr.Transform, Sequence[int]]]
    ) -> list[float | ValueError]:
        """The all-rows lambda of each ``(t, cols)`` (a response scale with a lambda to
        estimate, bank columns), or the ValueError the estimate raised: what
        ``fit_transform(t, y, bank.columns(cols)).lam`` gives, every one not already known
        found together (:func:`likelihood.many_lambdas`; the one-design path for those it
        does not take) and kept for the rest of the request."""
        keys = [(t.name, tuple(int(c) for c in cols)) for t, cols in items]
        todo: dict[tuple[str, tuple[int, ...]], tr.Transform] = {}
        for (t, _cols), key in zip(items, keys, strict=True):
            if key not in self._near:
                todo.setdefault(key, t)
        by_family: dict[str, list[tuple[str, tuple[int, ...]]]] = {}
        for key in todo:
            by_family.setdefault(key[0], []).append(key)
        for family, ks in by_family.items():
            designs = [self.bank.columns(np.asarray(k[1], dtype=int)) for k in ks]
            stacked: list[float | None] = (
                many_lambdas(family, self.y, designs)
                if len(designs) >= STACKED_LAMBDAS_MIN
                else [None] * len(designs)
            )
            for key, X, lam in zip(ks, designs, stacked, strict=True):
                if lam is None:  # the one-design path (and its reason when it fails)
                    try:
                        lam = fit_transform(todo[key], self.y, X).lam
                    except ValueError as exc:
                        self._near[key] = exc
                        continue
                    assert lam is not None  # fit_transform estimated it
                self._near[key] = float(lam)
        return [self._near[key] for key in keys]

    # ------------------------------------------------------------ response side
    def fixed_response(self, t: tr.Transform) -> tuple[tr.Transform, np.ndarray, bool]:
        """(concrete transform, z) for a response scale that does not change per fold."""
        if t not in self._resp:
            t0 = fit_transform(t, self.y, shift_needed=self.shift_needed)
            z = t0.forward(self.y)
            self._resp[t] = (t0, z, bool(np.all(np.isfinite(z))))
        return self._resp[t]

    def per_fold_response(self, t: tr.Transform) -> bool:
        """True when the response scale differs per training fold: a lambda estimated in
        every fold, or a log whose shift each fold chooses (the response has zeros)."""
        if t.needs_lambda:
            return True
        return t.name == "log" and t.shift is None and self.shift_needed

    # ---------------------------------------------------------------- scoring
    def score(
        self,
        t: tr.Transform,
        cols: list[int],
        names: list[str] | None = None,
        dynamic: Dynamic | None = None,
        keep_out_of_fold: bool = False,
        found: Found | None = None,
    ) -> CVResult:
        """``keep_out_of_fold``: also return the first repeat's fold fits and out-of-fold
        residuals (:class:`OutOfFold`, with each fold's estimated predictor powers);
        ``found``: the folds' powers or lambdas from :meth:`powers_many` /
        :meth:`lambdas_many`."""
        # Values near the float limits overflow in squares and products; every result is
        # checked for finiteness below and such a candidate fails with its reason.
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            return self._score(t, cols, names, dynamic, keep_out_of_fold, found=found)

    def out_of_fold(
        self,
        t: tr.Transform,
        cols: list[int],
        names: list[str] | None = None,
        dynamic: Dynamic | None = None,
    ) -> OutOfFold:
        """The first repeat's fold fits and out-of-fold residuals alone (CV+ intervals): the
        same folds as :meth:`score`, without scoring the other repeats again (with
        ``dynamic``, each fold's estimated predictor powers too)."""
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            sc = self._score(t, cols, names, dynamic, keep=True, first_only=True)
        assert sc.out_of_fold is not None  # kept for repeat 0
        return sc.out_of_fold

    def _score(
        self,
        t: tr.Transform,
        cols: list[int],
        names: list[str] | None,
        dynamic: Dynamic | None,
        keep: bool = False,
        first_only: bool = False,
        found: Found | None = None,
    ) -> CVResult:
        """Cross-validate the candidate (response scale ``t``, bank columns ``cols``).

        With ``dynamic`` the design has extra columns (at ``dynamic.positions``)
        whose powers are re-estimated on every training fold.  ``first_only``
        scores the first repeat alone.  Raises :class:`CandidateFailure` when a fold
        cannot be fitted or back-transformed.
        """
        pend = self._held_out(t, cols, names, dynamic, keep, first_only, found, smear=True)
        return self._errors(pend, [f.mean for f in pend.folds])

    def score_many(
        self,
        items: Sequence[Item],
    ) -> list[CVResult | CandidateFailure]:
        """:meth:`score` for many candidates ``(t, cols, names, dynamic, found)``: each one's
        held-out predictions as :meth:`score` forms them, then the smeared means of every
        fold of every candidate in one call (:func:`retransform.smeared_means`, power forms
        of all folds together) and the errors.  A candidate with a failure or a non-finite
        back-transform anywhere is scored again alone, so its result or failure reason is
        :meth:`score`'s own.  On a large table the candidates go in parts of at most
        ``_HELD_FLOATS`` floats of held-out predictions and training residuals (each
        candidate's are R (K + 1) n floats, 48 MB at a million rows): every fold's smeared
        mean is its own sum whatever else is in the call, so the numbers are the same up
        to the rounding of reductions over arrays of another width (a few 1e-16 relative)."""
        per = self.plan.repeats * (self.plan.folds + 1) * self.y.size
        step = max(1, _HELD_FLOATS // max(per, 1))
        out: list[CVResult | CandidateFailure] = []
        for a in range(0, len(items), step):
            out += self._score_many_part(items[a : a + step])
        return out

    def _score_many_part(
        self,
        items: Sequence[Item],
    ) -> list[CVResult | CandidateFailure]:
        """:meth:`score_many` for one part of its candidates."""
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            ready = self._estimated_many(items)
            pends: list[_Pending | None] = []
            for j, (t, cols, names, dyn, found) in enumerate(items):
                if j in ready:
                    pends.append(None)
                    continue
                try:
                    pends.append(self._held_out(t, cols, names, dyn, False, False, found))
                except CandidateFailure:
                    pends.append(None)
            shapes: dict[tuple[int, int], list[_HeldOut]] = {}
            for pend in pends:
                if pend is None:
                    continue
                if any(not np.all(np.isfinite(f.median)) for f in pend.folds):
                    pend.folds.clear()  # scored alone: its first failure in its own order
                    continue
                for f in pend.folds:
                    shapes.setdefault((f.eta.size, f.e.size), []).append(f)
            for group in shapes.values():
                got = retransform.smeared_means(
                    [f.t for f in group],
                    np.stack([f.eta for f in group]),
                    np.stack([f.e for f in group]),
                )
                for f, mean in zip(group, got, strict=True):
                    f.mean = mean
            out: list[CVResult | CandidateFailure] = []
            for j, (item, pend) in enumerate(zip(items, pends, strict=True)):
                done = ready.get(j)
                if done is not None:
                    out.append(done)
                    continue
                means = [] if pend is None else [f.mean for f in pend.folds]
                if (
                    pend is not None
                    and means
                    and all(m is not None and np.all(np.isfinite(m)) for m in means)
                ):
                    try:
                        out.append(self._errors(pend, means))
                        continue
                    except CandidateFailure:
                        pass
                t, cols, names, dyn, found = item
                try:
                    out.append(self._score(t, cols, names, dyn, found=found))
                except CandidateFailure as exc:
                    out.append(exc)
            return out

    def _estimated_many(
        self,
        items: Sequence[Item],
    ) -> dict[int, CVResult]:
        """The results of the candidates among ``items`` whose folds' lambdas or powers were
        found together (:meth:`lambdas_many`, :meth:`powers_many`), scored as a batch: every
        fold's response scale and design with its own lambda or powers, the training
        systems of all of them in one stacked solve (:func:`fitting.solve_batch`, the same
        column scaling, condition check and Cholesky), the held-out predictions and
        training residuals gathered for all folds of all candidates at once, the smeared
        means of every fold in one call per fold shape (:func:`retransform.smeared_means`)
        and the fold and pooled errors reduced in numpy.  A candidate the batch cannot
        settle as :meth:`score` would (a fold needing the exact refit, a training fold too
        small, a response scale or back-transform that is not finite anywhere, an error
        that is not finite) is left out: :meth:`score_many` scores it alone, so its result
        or failure is the one-candidate path's.  Index in ``items`` -> result."""
        K, R, n = self.plan.folds, self.plan.repeats, self.y.size
        take: list[int] = []
        for j, (t, _cols, _names, dyn, found) in enumerate(items):
            if found is None:
                continue
            if dyn is None and t.needs_lambda and found.lambdas is not None:
                if len(found.lambdas) == R * K and all(v is not None for v in found.lambdas):
                    take.append(j)
            elif (
                dyn is not None
                and found.powers is not None
                and not t.needs_lambda
                and not self.per_fold_response(t)
            ):
                take.append(j)
        out: dict[int, CVResult] = {}
        if not take:
            return out
        # floats held per candidate: designs (R K n p), scales and predictions (a few R K n)
        widest = max(
            len(cols) + (0 if dyn is None else len(dyn.positions))
            for _t, cols, _n, dyn, _f in (items[j] for j in take)
        )
        step = max(1, _STACK_FLOATS // max(1, R * K * n * (widest + 6)))
        for a in range(0, len(take), step):
            part = take[a : a + step]
            got = self._estimated_batch([items[j] for j in part])
            for j, res in zip(part, got, strict=True):
                if res is not None:
                    out[j] = res
        return out

    def _estimated_batch(
        self,
        items: Sequence[Item],
    ) -> list[CVResult | None]:
        bank, y, plan = self.bank, self.y, self.plan
        index = bank.index
        K, R, n = plan.folds, plan.repeats, y.size
        F = R * K
        train = [rows for r in range(R) for rows in index.train[r]]
        test = [rows for r in range(R) for rows in index.test[r]]
        Mtr = np.zeros((F, n), dtype=bool)
        for f, rows in enumerate(train):
            Mtr[f, rows] = True
        smallest = min(rows.size for rows in train)
        C = len(items)
        alive = np.ones(C, dtype=bool)
        scales: list[list[tr.Transform]] = []
        Z = np.empty((C, F, n))
        ETA = np.empty((C, F, n))
        lambdas: list[list[float]] = []
        powers: list[list[list[float]]] = []
        # ---- each candidate's fold scales and training systems, then one stacked solve
        systems: dict[int, list[tuple[int, np.ndarray, np.ndarray, np.ndarray]]] = {}
        for c, (t, cols, _names, dyn, found) in enumerate(items):
            assert found is not None  # chosen by _estimated_many
            S = np.asarray(cols, dtype=int)
            XS = bank.columns(S)
            p = S.size + (0 if dyn is None else len(dyn.positions))
            lambdas.append([])
            powers.append([])
            if smallest <= p:
                alive[c] = False
                scales.append([])
                continue
            if dyn is None:
                assert found.lambdas is not None  # all found (_estimated_many)
                ts = [replace(t, lam=lam, estimated=True) for lam in found.lambdas]
                Z[c] = np.stack([tk.forward(y) for tk in ts])
                lambdas[c] = [float(tk.lam) for tk in ts if tk.lam is not None]  # as set
                G = np.concatenate([self.train_grams(S, r) for r in range(R)])
                rhs = np.stack([XS[rows].T @ Z[c, f, rows] for f, rows in enumerate(train)])
                X = np.broadcast_to(XS, (F, n, p))
            else:
                assert found.powers is not None  # found (_estimated_many)
                t0, z, finite = self.fixed_response(t)
                if not finite:  # alone: the one-candidate path's reason
                    alive[c] = False
                    scales.append([])
                    continue
                ts = [t0] * F
                Z[c] = z
                A = np.array([fit.powers for fits in found.powers for fit in fits], dtype=float)
                powers[c] = A.tolist()
                W = power_w_stacked(np.log(dyn.x), A, dyn.boxcox_form)
                fixed_pos = [i for i in range(p) if i not in dyn.positions]
                X = np.empty((F, n, p))
                X[:, :, fixed_pos] = XS
                X[:, :, dyn.positions] = W
                Xm = X * Mtr[:, :, None]
                G = np.matmul(Xm.transpose(0, 2, 1), X)
                rhs = np.einsum("knp,kn->kp", Xm, Z[c])
            scales.append(ts)
            if not np.all(np.isfinite(Z[c]) | ~Mtr):
                alive[c] = False  # a scale that overflows on training rows: alone
                continue
            systems.setdefault(p, []).append((c, G, rhs, X))
        for group in systems.values():
            B, ok = solve_batch(
                np.concatenate([g[1] for g in group]), np.concatenate([g[2] for g in group])
            )
            for i, (c, _G, _rhs, X) in enumerate(group):
                Bc = B[i * F : (i + 1) * F]
                if not np.all(ok[i * F : (i + 1) * F]):
                    alive[c] = False  # the exact refit: alone
                    continue
                ETA[c] = np.einsum("knp,kp->kn", X, Bc)
        # ---- held-out predictions, medians and smeared means, all folds of one shape at once
        MEAN = np.full((C, R, n), np.nan)
        MED = np.full((C, R, n), np.nan)
        shapes: dict[tuple[int, int], list[int]] = {}
        for f in range(F):
            shapes.setdefault((test[f].size, train[f].size), []).append(f)
        for fs in shapes.values():
            live = np.flatnonzero(alive)
            if live.size == 0:
                break
            TE = np.stack([test[f] for f in fs])  # (Fg, m)
            TR = np.stack([train[f] for f in fs])  # (Fg, ntr)
            fa = np.asarray(fs, dtype=np.intp)
            rr = fa // K
            E = ETA[live][:, fa]
            eta = np.take_along_axis(E, TE[None], axis=2)  # (L, Fg, m)
            e = np.take_along_axis(Z[live][:, fa], TR[None], axis=2) - np.take_along_axis(
                E, TR[None], axis=2
            )
            med = np.empty_like(eta)
            for i, c in enumerate(live.tolist()):
                ts = scales[c]
                if all(ts[f] is ts[fs[0]] for f in fs):
                    med[i] = retransform.naive(ts[fs[0]], eta[i])
                else:
                    for g, f in enumerate(fs):
                        med[i, g] = retransform.naive(ts[f], eta[i, g])
            good = np.all(np.isfinite(med), axis=(1, 2))
            alive[live[~good]] = False
            keep = np.flatnonzero(good)
            if keep.size == 0:
                continue
            m, ntr = TE.shape[1], TR.shape[1]
            mean = retransform.smeared_means(
                [scales[int(live[i])][f] for i in keep.tolist() for f in fs],
                eta[keep].reshape(-1, m),
                e[keep].reshape(-1, ntr),
            ).reshape(keep.size, len(fs), m)
            cs = live[keep]
            MEAN[cs[:, None, None], rr[None, :, None], TE[None]] = mean
            MED[cs[:, None, None], rr[None, :, None], TE[None]] = med[keep]
        # ---- fold errors and pooled errors of every candidate at once
        live = np.flatnonzero(alive)
        out: list[CVResult | None] = [None] * C
        if live.size == 0:
            return out
        mean_l, med_l = MEAN[live], MED[live]  # (L, R, n)
        alive[live[~np.all(np.isfinite(mean_l), axis=(1, 2))]] = False
        sq = ((y - mean_l) ** 2).transpose(2, 0, 1)  # (n, L, R)
        ab = np.abs(y - med_l).transpose(2, 0, 1)
        pc = np.abs((y - med_l) / y).transpose(2, 0, 1) if self.want_mape else None
        fold_vals = np.empty((live.size, F))
        for f in range(F):
            r, te = f // K, test[f]
            fold_vals[:, f] = error_of(
                plan.metric, sq[te, :, r], ab[te, :, r], None if pc is None else pc[te, :, r]
            )
        pooled = {name: error_of(name, sq, ab, pc) for name in METRICS}  # (L, R) each
        for i, c in enumerate(live.tolist()):
            if not alive[c]:
                continue
            summary = summary_of(
                pooled["rmse"][i], pooled["mae"][i], pooled["mape"][i] if self.want_mape else None
            )
            value = summary.of(plan.metric)
            fv = fold_vals[i].copy()
            if value is None or not math.isfinite(value) or not np.all(np.isfinite(fv)):
                continue  # alone: the one-candidate path's reason
            out[c] = CVResult(
                plan.metric,
                value,
                std_error_of(fv, K),
                fv,
                summary,
                lambdas[c] or None,
                powers[c] or None,
                0,
                None,
            )
        return out

    def _held_out(
        self,
        t: tr.Transform,
        cols: list[int],
        names: list[str] | None,
        dynamic: Dynamic | None,
        keep: bool,
        first_only: bool,
        found: Found | None,
        smear: bool = False,
    ) -> _Pending:
        """Every fold's concrete scale, held-out predictions, medians and training residuals
        (:meth:`_score` up to the back-transform); with ``smear`` each fold's smeared mean
        too, a fold whose median or mean is not finite raising its failure in order."""
        bank, y, plan = self.bank, self.y, self.plan
        index = bank.index
        S = np.asarray(cols, dtype=int)
        n = y.size
        p = S.size + (len(dynamic.positions) if dynamic is not None else 0)
        estimate_lam = t.needs_lambda
        per_fold = self.per_fold_response(t)
        XS = bank.columns(S)
        near = None
        if dynamic is not None and estimate_lam:
            raise CandidateFailure(
                "an estimated predictor power is not combined with an estimated response lambda"
            )
        if estimate_lam and found is not None and found.lambdas is not None:
            near = found.near
        elif estimate_lam:
            got = self.all_rows_lambdas([(t, cols)])[0]
            if isinstance(got, ValueError):
                raise CandidateFailure(str(got)) from None
            near = got
        if not per_fold:
            t0, z, finite = self.fixed_response(t)
            if not finite:
                raise CandidateFailure(f"fold 1: {t0.label('y')} overflows on the training rows")
        lambdas: list[float] = []
        powers: list[list[float]] = []
        refits = 0
        K = plan.folds
        held: list[_HeldOut] = []
        oof: OutOfFold | None = None
        repeats = 1 if first_only else plan.repeats
        fixed = None if per_fold else (t0, z)
        powers_of: list[list[PowerFit]] | None = None
        lams_of: list[float | None] | None = None
        if found is not None and not first_only:
            powers_of = found.powers if dynamic is not None else None
            lams_of = found.lambdas if estimate_lam else None
        if powers_of is not None or lams_of is not None:
            pass  # found together with other candidates' (powers_many, lambdas_many)
        elif dynamic is not None and repeats > 1 and n * repeats * K <= POWER_BATCH_CELLS:
            powers_of = self._powers_all_repeats(t, S, XS, dynamic, per_fold, fixed)
        elif estimate_lam and repeats > 1 and n * repeats * K <= LAMBDA_BATCH_CELLS:
            # every repeat's folds in one batch (fewer, larger stacked steps)
            lams_of = fold_lambdas(
                t.name,
                y,
                XS,
                [rows for r in range(repeats) for rows in index.train[r]],
                np.concatenate([self.train_grams(S, r) for r in range(repeats)]),
                near,
            )
        for r in range(repeats):
            train, test = index.train[r], index.test[r]
            # ---- per-fold response scale and training solutions
            B = np.empty((K, p))
            ETA = np.empty((n, K))  # fitted values of every row under every fold's solution
            ts, zs = self._fold_scales(
                t,
                r,
                XS,
                p,
                fixed,
                near,
                lambdas,
                S,
                None if lams_of is None else lams_of[r * K : (r + 1) * K],
            )
            if dynamic is None:
                refits += self._solve_static(S, XS, r, zs, per_fold, t, names, B)
            else:
                refits += self._solve_dynamic(
                    S,
                    XS,
                    dynamic,
                    r,
                    zs,
                    per_fold,
                    t,
                    names,
                    B,
                    ETA,
                    powers,
                    None if powers_of is None else powers_of[r],
                )
            # ---- fitted values of every row under every fold's solution
            # (n, K), each fold's column contiguous; with estimated powers each fold's own
            # design (written by _solve_dynamic)
            if dynamic is None:
                ETA = (B @ XS.T).T
            if keep and r == 0:
                resid = np.empty(n)
                for k in range(K):
                    resid[test[k]] = zs[k][test[k]] - ETA[test[k], k]
                oof = OutOfFold(
                    plan.assignments[0].copy(),
                    resid,
                    B.copy(),
                    list(ts),
                    dynamic,
                    np.array(powers[:K], dtype=float) if dynamic is not None else None,
                )
            for k in range(K):
                te = test[k]
                tk = ts[k]
                eta = ETA[te, k]
                med = retransform.naive(tk, eta)
                e = zs[k][train[k]] - ETA[train[k], k]
                f = _HeldOut(r, te, tk, eta, e, med)
                held.append(f)
                if not smear:
                    continue
                bad = ~np.isfinite(med)
                if np.any(bad):
                    raise undefined_back_transform(tk, k, int(bad.sum()))
                f.mean = retransform.smeared_mean(tk, eta, e)
                bad = ~np.isfinite(f.mean)
                if np.any(bad):
                    raise undefined_back_transform(tk, k, int(bad.sum()))
        return _Pending(held, repeats, lambdas, powers, refits, oof)

    def _errors(self, pend: _Pending, means: Sequence[np.ndarray | None]) -> CVResult:
        """Fold errors, pooled errors and their summary from every fold's median and smeared
        mean (``means``, in the order of ``pend.folds``)."""
        y, plan, n, K = self.y, self.plan, self.y.size, self.plan.folds
        fold_vals = np.empty(plan.n_splits)
        pooled: dict[str, list[float]] = {name: [] for name in METRICS}
        j = 0
        for r in range(pend.repeats):
            sq = np.empty(n)
            ab = np.empty(n)
            pc = np.empty(n)
            for f, mean in zip(pend.folds, means, strict=True):
                if f.r != r:
                    continue
                assert mean is not None  # smeared
                te, med = f.test, f.median
                yt = y[te]
                with np.errstate(over="ignore", invalid="ignore"):
                    sq[te] = (yt - mean) ** 2
                    ab[te] = np.abs(yt - med)
                    if self.want_mape:
                        pc[te] = np.abs((yt - med) / yt)
                    fold_vals[j] = error_of(
                        plan.metric, sq[te], ab[te], pc[te] if self.want_mape else None
                    )
                j += 1
            with np.errstate(over="ignore", invalid="ignore"):
                for name in pooled:
                    pooled[name].append(
                        float(error_of(name, sq, ab, pc if self.want_mape else None))
                    )
        fold_vals = fold_vals[:j]
        summary = summary_of(
            np.array(pooled["rmse"]),
            np.array(pooled["mae"]),
            np.array(pooled["mape"]) if self.want_mape else None,
        )
        value = summary.of(plan.metric)
        if value is None or not math.isfinite(value):
            raise CandidateFailure(f"the {plan.metric} is not defined for this response")
        if not all(math.isfinite(v) for v in fold_vals):
            raise CandidateFailure("a fold error is not finite")
        return CVResult(
            plan.metric,
            value,
            std_error_of(fold_vals, K),
            fold_vals,
            summary,
            pend.lambdas or None,
            pend.powers or None,
            pend.refits,
            pend.oof,
        )

    def _fold_scales(
        self,
        t: tr.Transform,
        r: int,
        XS: np.ndarray,
        p: int,
        fixed: tuple[tr.Transform, np.ndarray] | None,
        near: float | None,
        lambdas: list[float] | None,
        S: np.ndarray | None = None,
        lams_found: list[float | None] | None = None,
    ) -> tuple[list[tr.Transform], list[np.ndarray]]:
        """Each training fold's concrete response scale and z on all rows (repeat r);
        ``fixed``: the scale that does not change per fold.  Estimated lambdas are appended
        to ``lambdas`` (when given); ``lams_found``: the folds' lambdas when already found
        (None for a fold the one-fold path answers)."""
        train = self.bank.index.train[r]
        K = len(train)
        for k in range(K):
            if train[k].size <= p:
                raise CandidateFailure(
                    f"fold {k + 1}: {train[k].size} training rows cannot estimate {p} coefficients"
                )
        if fixed is not None:
            return [fixed[0]] * K, [fixed[1]] * K
        estimate_lam = t.needs_lambda
        ts: list[tr.Transform] = []
        zs: list[np.ndarray] = []
        y = self.y
        # a lambda's profile likelihood needs each fold's X'X: the bank's downdated ones;
        # every fold's lambda is found in one batch, a fold it does not take on its own
        grams = self.train_grams(S, r) if estimate_lam and S is not None else None
        lams: list[float | None] = [None] * K
        if lams_found is not None:
            lams = lams_found
        elif grams is not None and y.size * K <= LAMBDA_BATCH_CELLS:
            lams = fold_lambdas(t.name, y, XS, train, grams, near)
        for k in range(K):
            lam_k = lams[k]
            try:
                tk = (
                    replace(t, lam=lam_k, estimated=True)
                    if lam_k is not None
                    else fit_transform(
                        t,
                        y[train[k]],
                        XS[train[k]],
                        shift_needed=self.shift_needed,
                        near=near,
                        gram=None if grams is None else grams[k],
                    )
                )
            except ValueError as exc:
                raise CandidateFailure(f"fold {k + 1}: {exc}") from None
            if estimate_lam and lambdas is not None:
                assert tk.lam is not None  # fit_transform estimated it
                lambdas.append(float(tk.lam))
            zk = tk.forward(y)
            if not np.all(np.isfinite(zk[train[k]])):
                raise CandidateFailure(
                    f"fold {k + 1}: {tk.label('y')} overflows on the training rows"
                )
            ts.append(tk)
            zs.append(zk)
        return ts, zs

    def _power_problem(
        self,
        t: tr.Transform,
        S: np.ndarray,
        XS: np.ndarray,
        dyn: Dynamic,
        per_fold: bool,
        fixed: tuple[tr.Transform, np.ndarray] | None,
    ) -> FoldPowerProblem:
        """The per-fold power estimates of every training fold of every repeat, as
        :func:`boxtidwell.estimate_fold_powers` takes them (fixed cross-products downdated
        from the bank).  Raises :class:`CandidateFailure` when a fold's response scale
        cannot be formed."""
        bank, R = self.bank, self.plan.repeats
        train_all = [rows for r in range(R) for rows in bank.index.train[r]]
        zs_all = [z for r in range(R) for z in self._fold_scales(t, r, XS, 0, fixed, None, None)[1]]
        grams = np.concatenate([self.train_grams(S, r) for r in range(R)])
        if not per_fold:
            cf, ctot = bank.cross(t, zs_all[0])
            crosses: np.ndarray | None = np.concatenate(
                [ctot[r][S][None, :] - cf[r][:, S] for r in range(R)]
            )
            Z = zs_all[0]
        else:
            crosses = None
            Z = np.stack(zs_all)
        return FoldPowerProblem(
            Z,
            XS,
            dyn.x,
            train_all,
            dyn.start,
            grams,
            crosses,
            [k + 1 for _r in range(R) for k in range(self.plan.folds)],
        )

    def _powers_all_repeats(
        self,
        t: tr.Transform,
        S: np.ndarray,
        XS: np.ndarray,
        dyn: Dynamic,
        per_fold: bool,
        fixed: tuple[tr.Transform, np.ndarray] | None,
    ) -> list[list[PowerFit]] | None:
        """The estimated powers of every training fold of every repeat in one batch (fewer,
        larger stacked steps than one batch per repeat), or None when a fold fails: the
        repeat-by-repeat path then meets and reports the first failure in its own order."""
        try:
            pr = self._power_problem(t, S, XS, dyn, per_fold, fixed)
            fits = estimate_fold_powers(
                pr.z,
                pr.Xf,
                pr.x,
                pr.train,
                pr.start,
                dyn.boxcox_form,
                grams=pr.grams,
                crosses=pr.crosses,
                labels=pr.labels,
            )
        except CandidateFailure:
            return None
        K = self.plan.folds
        return [fits[r * K : (r + 1) * K] for r in range(self.plan.repeats)]

    def powers_many(
        self, items: Sequence[tuple[tr.Transform, Sequence[int], Dynamic]]
    ) -> list[Found | None]:
        """The fold powers of many candidates (response scale, bank columns, the columns
        whose powers every fold estimates), all repeats' folds of all of them stepped
        together (:func:`boxtidwell.estimate_many_fold_powers`): what :meth:`score` finds
        for each alone.  None for a candidate :meth:`score` must settle alone: a fold that
        fails (it reports the first failure in its own order), a response lambda, a table
        above ``POWER_BATCH_CELLS`` for all repeats at once."""
        R, K = self.plan.repeats, self.plan.folds
        out: list[Found | None] = [None] * len(items)
        if self.y.size * R * K > POWER_BATCH_CELLS:
            return out
        forms: dict[bool, tuple[list[int], list[FoldPowerProblem]]] = {}
        for i, (t, cols, dyn) in enumerate(items):
            if t.needs_lambda:
                continue
            S = np.asarray(cols, dtype=int)
            XS = self.bank.columns(S)
            per_fold = self.per_fold_response(t)
            fixed = None
            if not per_fold:
                t0, z, finite = self.fixed_response(t)
                if not finite:
                    continue
                fixed = (t0, z)
            try:
                pr = self._power_problem(t, S, XS, dyn, per_fold, fixed)
            except CandidateFailure:
                continue
            where, probs = forms.setdefault(dyn.boxcox_form, ([], []))
            where.append(i)
            probs.append(pr)
        for form, (where, probs) in forms.items():
            for i, fits in zip(where, estimate_many_fold_powers(probs, form), strict=True):
                if not isinstance(fits, CandidateFailure):
                    out[i] = Found(powers=[fits[r * K : (r + 1) * K] for r in range(R)])
        return out

    def lambdas_many(
        self, items: Sequence[tuple[tr.Transform, Sequence[int]]]
    ) -> list[Found | None]:
        """The all-rows lambda and the fold lambdas of many candidates (response scale with
        a lambda to estimate, bank columns), all repeats' folds of all of them found
        together (:func:`likelihood.many_fold_lambdas`): what :meth:`score` finds for each
        alone.  None for a candidate :meth:`score` settles alone (no all-rows lambda, a
        table above ``LAMBDA_BATCH_CELLS`` for all repeats at once)."""
        R, K = self.plan.repeats, self.plan.folds
        out: list[Found | None] = [None] * len(items)
        if self.y.size * R * K > LAMBDA_BATCH_CELLS:
            return out
        train_all = [rows for r in range(R) for rows in self.bank.index.train[r]]
        fams: dict[str, tuple[list[int], list[FoldLambdaProblem]]] = {}
        want = [i for i, (t, _cols) in enumerate(items) if t.needs_lambda]
        nears = self.all_rows_lambdas([items[i] for i in want])
        for i, near in zip(want, nears, strict=True):
            if isinstance(near, ValueError):
                continue
            t, cols = items[i]
            S = np.asarray(cols, dtype=int)
            XS = self.bank.columns(S)
            grams = np.concatenate([self.train_grams(S, r) for r in range(R)])
            where, probs = fams.setdefault(t.name, ([], []))
            where.append(i)
            probs.append(FoldLambdaProblem(XS, train_all, grams, near))
        for family, (where, probs) in fams.items():
            got = many_fold_lambdas(family, self.y, probs)
            for i, pr, lams in zip(where, probs, got, strict=True):
                out[i] = Found(near=pr.near, lambdas=lams)
        return out

    # ------------------------------------------------------------- solutions
    def _solve_static(
        self,
        S: np.ndarray,
        XS: np.ndarray,
        r: int,
        zs: list[np.ndarray],
        per_fold: bool,
        t: tr.Transform,
        names: list[str] | None,
        B: np.ndarray,
    ) -> int:
        bank = self.bank
        train = bank.index.train[r]
        K = len(train)
        G = self.train_grams(S, r)
        if not per_fold:
            cf, ctot = bank.cross(t, zs[0])
            c = ctot[r][S][None, :] - cf[r][:, S]
        else:
            c = np.stack([XS[train[k]].T @ zs[k][train[k]] for k in range(K)])
        return _solve_or_refit(G, c, B, lambda k: (XS[train[k]], zs[k][train[k]]), names)

    def _solve_dynamic(
        self,
        S: np.ndarray,
        XS: np.ndarray,
        dyn: Dynamic,
        r: int,
        zs: list[np.ndarray],
        per_fold: bool,
        t: tr.Transform,
        names: list[str] | None,
        B: np.ndarray,
        ETA: np.ndarray,
        powers: list[list[float]],
        fits: list[PowerFit] | None = None,
    ) -> int:
        """Every training fold's powers at once (``boxtidwell.estimate_fold_powers``, from the
        bank's downdated Gram matrices of the fixed columns; on a large table, see
        POWER_BATCH_CELLS, ``estimate_fold_powers_by_series``, or fold by fold when the
        response differs between folds), then every fold's solution in one stacked solve with the
        exact refit fallback."""
        bank = self.bank
        train = bank.index.train[r]
        K = len(train)
        p = B.shape[1]
        fixed_pos = [i for i in range(p) if i not in dyn.positions]
        if fits is None and XS.shape[0] * K > POWER_BATCH_CELLS and not per_fold:
            # a large table: every fold's steps from series cross-products summed once
            fits = estimate_fold_powers_by_series(
                zs[0], XS, dyn.x, train, dyn.start, boxcox_form=dyn.boxcox_form
            )
        if fits is None and XS.shape[0] * K > POWER_BATCH_CELLS:
            fits = []  # a large table with a response per fold: fold by fold
            for k in range(K):
                rows = train[k]
                try:
                    fits.append(
                        estimate_powers(
                            zs[k][rows],
                            XS[rows],
                            dyn.x[rows],
                            start=dyn.start,
                            boxcox_form=dyn.boxcox_form,
                            with_se=False,
                        )
                    )
                except CandidateFailure as exc:
                    raise CandidateFailure(f"fold {k + 1}: {exc.reason}") from None
        if fits is None:
            Gff = self.train_grams(S, r)
            if not per_fold:
                cf, ctot = bank.cross(t, zs[0])
                cff: np.ndarray | None = ctot[r][S][None, :] - cf[r][:, S]
                Z = zs[0]
            else:
                Z = np.stack(zs)
                cff = None
            fits = estimate_fold_powers(
                Z, XS, dyn.x, train, dyn.start, dyn.boxcox_form, grams=Gff, crosses=cff
            )
        A = np.array([fit.powers for fit in fits], dtype=float)
        powers.extend(A.tolist())
        if XS.shape[0] * K > BY_FOLD_DESIGN_CELLS:
            return self._solve_dynamic_by_fold(S, XS, dyn, r, zs, names, A, B, ETA)
        # every fold's design at its own powers, all folds at once (the same columns as
        # power_columns fold by fold), then the training sums as masked products
        W = power_w_stacked(np.log(dyn.x), A, dyn.boxcox_form)
        n = XS.shape[0]
        X = np.empty((K, n, p))
        X[:, :, fixed_pos] = XS
        X[:, :, dyn.positions] = W
        M = np.zeros((K, n))
        for k in range(K):
            M[k, train[k]] = 1.0
        Xm = X * M[:, :, None]
        G = np.matmul(Xm.transpose(0, 2, 1), X)
        c = np.einsum("knp,kn->kp", Xm, np.stack(zs))
        refits = _solve_or_refit(G, c, B, lambda k: (X[k][train[k]], zs[k][train[k]]), names)
        ETA[:] = np.einsum("knp,kp->nk", X, B)  # the same product as _fitted's
        return refits

    def _solve_dynamic_by_fold(
        self,
        S: np.ndarray,
        XS: np.ndarray,
        dyn: Dynamic,
        r: int,
        zs: list[np.ndarray],
        names: list[str] | None,
        A: np.ndarray,
        B: np.ndarray,
        ETA: np.ndarray,
    ) -> int:
        """:meth:`_solve_dynamic`'s solutions and fitted values on a large table without
        any fold's whole design: the power columns of every fold (``boxtidwell.
        _power_w_into``, element for element the arithmetic of the all-folds path's
        ``power_w_stacked``), the
        training sums as all rows' sums minus the held-out rows' (the fixed columns' from
        the bank, as the static path takes them; the rest from one product over all rows
        and one over each fold's held-out rows), and every row's fitted value from the
        fixed columns' product plus the power columns', written into ``ETA`` (n, K).  It
        holds the power columns (K k n floats, k <= 2) where the all-folds path holds four
        arrays of K n p floats (0.96 GB at a million rows, 5 folds, 6 columns) and passes
        over every row of every fold's design twice."""
        test = self.bank.index.test[r]
        K, n, p = len(test), XS.shape[0], B.shape[1]
        kd = len(dyn.positions)
        dpos = np.asarray(dyn.positions, dtype=int)
        fpos = np.array([i for i in range(p) if i not in dyn.positions], dtype=int)
        L = np.ascontiguousarray(np.log(dyn.x).T)[None]  # (1, k, n): passes over rows
        W = np.empty((K, kd, n))
        with np.errstate(over="ignore", invalid="ignore"):  # as power_w_stacked
            _power_w_into(L, A, dyn.boxcox_form, W)
        XT = np.ascontiguousarray(XS.T)  # (p_f, n)
        G = np.empty((K, p, p))
        c = np.empty((K, p))
        G[:, fpos[:, None], fpos[None, :]] = self.train_grams(S, r)
        FW = (XT @ W.reshape(K * kd, n).T).reshape(-1, K, kd)  # all rows, every fold
        same = all(zk is zs[0] for zk in zs)
        Xz = XT @ zs[0]
        for k, te in enumerate(test):
            zk = zs[k]
            Xte, Wte, zte = XT[:, te], W[k][:, te], zk[te]
            fw = FW[:, k, :] - Xte @ Wte.T
            G[k, fpos[:, None], dpos[None, :]] = fw
            G[k, dpos[:, None], fpos[None, :]] = fw.T
            G[k, dpos[:, None], dpos[None, :]] = W[k] @ W[k].T - Wte @ Wte.T
            c[k, fpos] = (Xz if same else XT @ zk) - Xte @ zte
            c[k, dpos] = W[k] @ zk - Wte @ zte
        train = self.bank.index.train[r]

        def fold(f: int) -> tuple[np.ndarray, np.ndarray]:  # fold f's training design
            rows = train[f]
            X = np.empty((rows.size, p))
            X[:, fpos] = XS[rows]
            X[:, dpos] = W[f][:, rows].T
            return X, zs[f][rows]

        refits = _solve_or_refit(G, c, B, fold, names)
        ETA[:] = XS @ B[:, fpos].T
        for k in range(K):
            ETA[:, k] += W[k].T @ B[k, dpos]
        return refits
