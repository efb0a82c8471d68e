"""Search response and predictor transformations, score each candidate, rank them.

Ranking (documented in DEVELOPERS.md): the primary criterion is the
cross-validated error on the original response scale.  Among the candidates
whose error is within one standard error of the lowest (the one-standard-error
rule: Breiman, Friedman, Olshen & Stone 1984, p. 80; Hastie, Tibshirani &
Friedman 2009, pp. 61 and 244) the simplest ranks first (simplicity order in
:meth:`Specification.simplicity`); the others follow by their error.
"""

from __future__ import annotations

import itertools
import math
import re
import time
from collections.abc import Callable, Iterable
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from ..core import boxtidwell as bt
from ..core import sources as src
from ..core import transforms as tr
from ..core.bank import FoldIndex
from ..core.batchcv import batchable, score_many
from ..core.condition_rules import failed, failed_for_ranking, ordering_conditions
from ..core.conditions import CONDITION_NAMES, ConditionReport, white_seconds
from ..core.cvplus import NOT_KEPT
from ..core.cvresult import CVResult, Dynamic, OutOfFold, std_errors_of
from ..core.data import DataSummary, Prepared
from ..core.errors import (
    BudgetError,
    CandidateFailure,
    InputError,
    ModelFailure,
    Predictor,
    ResponseChoice,
)
from ..core.fastcv import Found, Scorer
from ..core.folds import CVPlan, make_plan
from ..core.likelihood import LambdaEstimate, estimate_lambda, fit_transform
from ..core.numbers import count_of, failure_text
from ..core.spec import Design, PredictorSpec, Specification, SpecKey, build_design
from . import candidates as cand
from . import incumbent
from .deadline import Deadline
from .entries import (
    ConditionCount,
    Entry,
    EntryReport,
    Estimates,
    LadderReading,
    ScoreParts,
    Simplicity,
    attach_cv_plus,
    entry_for,
    with_white,
)
from .search_setup import Scored, SearchOptions, check_rows
from .strategy import EXHAUSTIVE_LIMIT, Budget, screened_search

MAX_FAILURES_LISTED = 10


@dataclass(frozen=True)
class FailureGroup:
    """Failed candidates whose reasons differ only in their numbers: the most frequent
    ``reason`` wording, how many ``candidates`` failed so and in how many ``wordings``."""

    reason: str
    candidates: int
    wordings: int

    def text(self) -> str:
        return failure_text(self.reason, self.candidates, self.wordings)


def failure_groups(reasons: dict[str, int]) -> list[FailureGroup]:
    """Failed candidates grouped by reason, most frequent first (at most MAX_FAILURES_LISTED).

    Reasons that differ only in their numbers (fold, row count) are one group, shown by its
    most frequent wording.
    """
    groups: dict[str, list[Any]] = {}  # key -> [count, example, example's count, wordings]
    for reason, n in reasons.items():
        key = " ".join(w.rstrip("s") for w in re.sub(r"\d+(\.\d+)?", "#", reason).split())
        g = groups.setdefault(key, [0, reason, n, 0])
        g[0] += n
        g[3] += 1
        if n > g[2] or (n == g[2] and reason < g[1]):
            g[1], g[2] = reason, n
    ordered = sorted(groups.values(), key=lambda g: (-g[0], g[1]))
    return [FailureGroup(g[1], g[0], g[3]) for g in ordered[:MAX_FAILURES_LISTED]]


SMALL_N = 50  # below this many rows the default search puts all predictors on one scale
# the screening step's power estimates stop once this share of the time left has passed
SCREEN_SHARE = 0.5


def _simplicity_sorted(cands: list[Specification]) -> list[Specification]:
    return sorted(cands, key=lambda s: s.simplicity())


class KeptLambdas:
    """Response lambdas estimated on all rows with their interval
    (:func:`likelihood.estimate_lambda`), kept by their inputs (family, response, design)
    for the rest of the request: the reported Box-Cox lambda, the ladder readings of
    estimated candidates and the lambda on rank 1's design ask for the same estimate on
    the same design more than once.  A failure is kept too and raised again."""

    def __init__(self) -> None:
        self._got: dict[bytes, LambdaEstimate | CandidateFailure | ValueError] = {}
        self.hits = 0

    def estimate(self, family: str, y: np.ndarray, X: np.ndarray) -> LambdaEstimate:
        key = cand.inputs_key(family.encode(), y, X)
        got = self._got.get(key)
        if got is None:
            try:
                got = estimate_lambda(family, y, X)
            except (CandidateFailure, ValueError) as exc:
                got = exc
            self._got[key] = got
        else:
            self.hits += 1
        if isinstance(got, Exception):
            raise got
        return got


@dataclass(frozen=True)
class _Pre:
    """What :meth:`_Evaluator._found` prepared for one specification: the columns whose
    powers every fold estimates and their all-rows fit, and what the batch found for its
    folds (None: the scorer finds it alone)."""

    dynamic: Dynamic | None
    fit: bt.PowerFit | None
    found: Found | None


class _Evaluator:
    """Exact original-scale scoring of specifications over one column bank."""

    def __init__(
        self,
        prep: Prepared,
        space: cand.Space,
        scorer: Scorer,
        intercept: bool,
        fits: cand.PowerFits | None = None,
        lambdas: KeptLambdas | None = None,
    ):
        self.prep, self.space, self.scorer, self.intercept = prep, space, scorer, intercept
        self.fits = fits if fits is not None else cand.PowerFits()  # all-rows power fits
        self.lambdas = lambdas if lambdas is not None else KeptLambdas()  # all-rows lambdas
        self.scored: list[Scored] = []
        self.failures: list[Failure] = []
        self.n_fail = 0
        self.reasons: dict[str, int] = {}  # every failure's reason -> candidates
        self.powers: dict[
            SpecKey, dict[str, bt.PowerSummary]
        ] = {}  # concrete key -> {column: summary}

    def __call__(self, spec: Specification, pre: _Pre | None = None) -> Scored | None:
        try:
            s = self._score(spec, pre)
        except CandidateFailure as exc:
            self._failed(spec, exc)
            return None
        self.scored.append(s)
        return s

    def many(self, specs: list[Specification]) -> list[Scored | None]:
        """Score ``specs`` as one call each would, in order (the Scored of each, or None where
        it failed): specifications on a response scale fixed across folds, with no power
        estimated per fold, are scored together (:func:`batchcv.score_many`, the same
        numbers); the others one at a time, with the powers or lambdas of their training
        folds found for all of them together first (:meth:`_found`)."""
        designs: dict[int, tuple[list[int], list[str] | None]] = {}
        groups: dict[tr.Transform, list[int]] = {}
        rest: dict[int, tuple[list[int], list[str] | None, list[int]]] = {}
        for i, spec in enumerate(specs):
            t = spec.response_transform
            try:
                cols, names, dyn = self.space.design_of(spec)
            except CandidateFailure:
                continue  # scored alone below, which records the reason
            if dyn or not batchable(self.scorer, t):
                rest[i] = (cols, names, dyn)
                continue
            designs[i] = (cols, names)
            groups.setdefault(t, []).append(i)
        pre = self._found(specs, rest)
        done: dict[int, CVResult | CandidateFailure] = {}
        for t, members in groups.items():
            got = score_many(
                self.scorer, t, [designs[i][0] for i in members], [designs[i][1] for i in members]
            )
            done.update(zip(members, got, strict=True))
        # the others' held-out predictions one candidate at a time, their smeared means and
        # errors together (Scorer.score_many: the same numbers as one call each)
        together = [i for i, (_c, _n, dyn) in rest.items() if i in pre or not dyn]
        got = self.scorer.score_many(
            [
                (
                    specs[i].response_transform,
                    rest[i][0],
                    rest[i][1],
                    pre[i].dynamic if i in pre else None,
                    pre[i].found if i in pre else None,
                )
                for i in together
            ]
        )
        ready = dict(zip(together, got, strict=True))
        out: list[Scored | None] = []
        for i, spec in enumerate(specs):
            if i in ready:
                try:
                    res = ready[i]
                    if isinstance(res, CandidateFailure):
                        raise res
                    made = self._concrete(spec, res, pre.get(i))
                except CandidateFailure as exc:
                    self._failed(spec, exc)
                    out.append(None)
                    continue
                self.scored.append(made)
                out.append(made)
                continue
            if i not in done:
                out.append(self(spec, pre.get(i)))
                continue
            res = done[i]
            if isinstance(res, CandidateFailure):
                self._failed(spec, res)
                out.append(None)
            else:
                made = Scored(spec, res)
                self.scored.append(made)
                out.append(made)
        return out

    def _failed(self, spec: Specification, exc: CandidateFailure) -> None:
        self.n_fail += 1
        self.reasons[exc.reason] = self.reasons.get(exc.reason, 0) + 1
        if len(self.failures) < MAX_FAILURES_LISTED:
            self.failures.append(Failure(spec, exc.reason))

    def out_of_fold(self, s: Scored, deadline: Deadline) -> tuple[OutOfFold | None, str]:
        """The first repeat's fold fits and out-of-fold residuals of ``s`` (CV+ intervals),
        or None and why: the same folds scored again, so the numbers are the search's own
        (predictor powers estimated inside every fold are estimated again from the same
        all-rows start, so each fold's powers are the search's own too); past the
        request's deadline none is computed."""
        spec = s.open_spec or s.spec
        if deadline.passed():
            return None, (
                f"the request's time limit of {deadline.limit_s:g} s ran out before this "
                "entry's out-of-fold fits were kept; raise limits.time_limit_s to get them"
            )
        try:
            cols, names, dyn = self.space.design_of(spec)
            dynamic, _ = self._dynamic(spec, cols, dyn)
            oof = self.scorer.out_of_fold(spec.response_transform, cols, names, dynamic)
        except CandidateFailure as exc:
            return None, f"its folds could not be scored again ({exc.reason})"
        return oof, NOT_KEPT

    def _dynamic(
        self, spec: Specification, cols: list[int], dyn: list[int]
    ) -> tuple[Dynamic | None, bt.PowerFit | None]:
        """The columns whose powers every training fold estimates, started at the all-rows
        estimate (also returned), or (None, None) when ``spec`` estimates no power."""
        if not dyn:
            return None, None
        z, x = self._power_inputs(spec)
        fit = self.fits.estimate(z, self.space.bank.columns(cols), x, self.intercept)
        return self._started(spec, dyn, x, fit), fit

    def _power_inputs(self, spec: Specification) -> tuple[np.ndarray, np.ndarray]:
        """(z, x): the response on the specification's scale fitted on all rows, and the
        predictors whose powers it estimates (n, k)."""
        est_cols = [p.column for p in spec.predictors if bt.is_open(p.transform)]
        t0 = fit_transform(
            spec.response_transform, self.prep.y, shift_needed=self.scorer.shift_needed
        )
        z = t0.forward(self.prep.y)
        if not np.all(np.isfinite(z)):
            raise CandidateFailure(f"{t0.label('y')} overflows on the data")
        return z, np.column_stack([self.prep.numeric[c] for c in est_cols])

    def _started(
        self, spec: Specification, dyn: list[int], x: np.ndarray, fit: bt.PowerFit
    ) -> Dynamic:
        est_cols = tuple(p.column for p in spec.predictors if bt.is_open(p.transform))
        return Dynamic(dyn, x, fit.powers, self.intercept, est_cols)

    def _found(
        self,
        specs: list[Specification],
        rest: dict[int, tuple[list[int], list[str] | None, list[int]]],
    ) -> dict[int, _Pre]:
        """For the specifications scored one at a time (``rest``: index -> design): each
        one's all-rows power estimate (the start of its folds', all of them at once:
        :func:`boxtidwell.estimate_many_powers`; one whose inputs the screening step
        already estimated takes that fit from ``self.fits``) and the powers or lambdas of
        its training folds, found for all of them together (:meth:`Scorer.powers_many`,
        :meth:`Scorer.lambdas_many`).  A specification whose all-rows estimate fails is
        left out: scoring it alone records the failure in its place."""
        pre: dict[int, _Pre] = {}
        power_items: list[tuple[int, tr.Transform, list[int], Dynamic]] = []
        lambda_items: list[tuple[int, tr.Transform, list[int]]] = []
        starts: list[tuple[int, np.ndarray, np.ndarray, np.ndarray]] = []
        for i, (cols, _names, dyn) in rest.items():
            spec = specs[i]
            t = spec.response_transform
            if dyn:
                try:
                    z, x = self._power_inputs(spec)
                except CandidateFailure:
                    continue
                starts.append((i, z, self.space.bank.columns(cols), x))
            elif t.needs_lambda:
                lambda_items.append((i, t, cols))
        # every all-rows start not kept from the screening step in one batch
        fits = self.fits.estimate_many([(z, Xf, x) for _i, z, Xf, x in starts], self.intercept)
        for (i, _z, _Xf, x), fit in zip(starts, fits, strict=True):
            if isinstance(fit, CandidateFailure):
                continue
            cols, _names, dyn = rest[i]
            dynamic = self._started(specs[i], dyn, x, fit)
            pre[i] = _Pre(dynamic, fit, None)
            power_items.append((i, specs[i].response_transform, cols, dynamic))
        got = self.scorer.powers_many([(t, c, d) for _i, t, c, d in power_items])
        for (i, *_r), found in zip(power_items, got, strict=True):
            pre[i] = replace(pre[i], found=found)
        got = self.scorer.lambdas_many([(t, c) for _i, t, c in lambda_items])
        for (i, *_r), found in zip(lambda_items, got, strict=True):
            pre[i] = _Pre(None, None, found)
        return pre

    def _score(self, spec: Specification, pre: _Pre | None = None) -> Scored:
        cols, names, dyn = self.space.design_of(spec)
        t = spec.response_transform
        dynamic: Dynamic | None
        if pre is not None and pre.dynamic is not None:
            dynamic, fit = pre.dynamic, pre.fit
        else:
            dynamic, fit = self._dynamic(spec, cols, dyn)
        res = self.scorer.score(t, cols, names, dynamic, found=None if pre is None else pre.found)
        return self._concrete(spec, res, _Pre(dynamic, fit, None))

    def _concrete(self, spec: Specification, res: CVResult, pre: _Pre | None) -> Scored:
        """``spec`` scored as ``res``: with estimated powers (``pre.fit``, the all-rows
        estimate) the concrete specification, its powers' summary kept in ``self.powers``."""
        fit = None if pre is None else pre.fit
        if fit is None:
            return Scored(spec, res)
        t = spec.response_transform
        est_cols = [p.column for p in spec.predictors if bt.is_open(p.transform)]
        a = iter(fit.powers)
        concrete = Specification(
            spec.response,
            t,
            tuple(
                PredictorSpec(
                    p.column,
                    bt.concrete_transform(next(a)) if bt.is_open(p.transform) else p.transform,
                )
                for p in spec.predictors
            ),
            spec.intercept,
        )
        per_fold = np.array(res.fold_powers)
        self.powers[concrete.key] = {
            c: replace(fit.summary(j), per_fold=tuple(per_fold[:, j].tolist()))
            for j, c in enumerate(est_cols)
        }
        return Scored(concrete, res, spec)


@dataclass(frozen=True)
class Failure:
    """A candidate that could not be scored, and why (the first MAX_FAILURES_LISTED)."""

    spec: Specification
    reason: str


@dataclass(frozen=True)
class BestCV:
    """The lowest cross-validated error of the search and the candidate that had it."""

    value: float
    std_error: float
    spec: Specification


#: how estimated scales are read against the ladder before listing (``search.distinct_scales``)
SCALES_RULE = (
    "an estimated response lambda or predictor power whose 95% interval holds a "
    "ladder value (-1, -0.5, 0, 0.5, 1, 2) is listed as that ladder value (the "
    "estimate stays in the entry's estimates.read_as_ladder); an estimated scale "
    "that is not a ladder value is listed only when its CV error beats the best "
    "fixed-scale candidate by more than that candidate's standard error; no two "
    "listed entries share their scales"
)


@dataclass(frozen=True)
class ScalesSummary:
    """Estimated candidates read as ladder values, listed with their estimate, or left out
    (see :func:`distinct_scales`)."""

    read_as_ladder: int
    estimated_listed: int
    estimated_not_listed: int


@dataclass(frozen=True)
class LambdaOnDesign:
    """A Box-Cox lambda estimated with the predictors on the scales ``design`` names."""

    design: str
    estimate: LambdaEstimate


@dataclass(frozen=True)
class BoxCoxReport:
    """The search's Box-Cox lambda (untransformed predictors) and, when rank 1's response
    scale is not what it suggests, lambda on rank 1's design with a sentence on why they
    differ."""

    reported: LambdaOnDesign
    on_rank_1_design: LambdaOnDesign | None = None
    context: str | None = None


@dataclass(frozen=True)
class ScreenedPower:
    """A predictor power estimated while screening, under one response scale."""

    response_transform: tr.Transform
    estimate: bt.PowerSummary


@dataclass(frozen=True)
class SearchSummary:
    """What one search did: candidates considered / scored / failed / screened, whether it
    finished, how long it took, the strategy, the scales searched, the lowest error, the
    band, how estimated scales were listed, the failures and their reasons, exact refits,
    and (when estimated) the response's Box-Cox lambda and the predictors' powers."""

    considered: int
    scored: int
    failed: int
    screened: int
    complete: bool
    elapsed_s: float
    strategy: StrategyReport
    response_transforms: tuple[tr.Transform, ...]
    predictor_transforms: tuple[tuple[str, tuple[tr.Transform, ...]], ...]
    best_cv: BestCV
    band: BandReport
    distinct_scales: ScalesSummary
    failures: tuple[Failure, ...]
    failure_reasons: tuple[FailureGroup, ...]
    exact_refits: int
    box_cox: BoxCoxReport | None
    predictor_powers: dict[str, list[ScreenedPower]] | None


@dataclass(frozen=True)
class SelectionReport:
    """The selection body of the contract: the rows used (``data``), the search summary,
    the ranking entries, the incumbent decision (when one was sent), the warnings, the
    trust measures (when asked for) and, once :func:`.request.finish_body` finished it,
    the service version and the cautions."""

    data: DataSummary
    search: SearchSummary
    ranking: tuple[EntryReport, ...]
    warnings: tuple[str, ...]
    incumbent: incumbent.IncumbentDecision | None = None
    trust: Any = None  # a trust.Trust (which imports this module) when measured
    service_version: str | None = None
    cautions: tuple[str, ...] | None = None


@dataclass(frozen=True)
class Selection:
    """One search's result: the contract's selection ``body`` (unfinished: no version,
    the distinct-scale candidates it ranked (``scored``; trust re-ranks them), its fold
    ``plan``, the candidate listed at rank 1 (``winner``, one of ``scored``), whether
    every candidate of the space was scored (``complete``) and the listed entries' all-rows
    fits (``fits``, rank 1 first)."""

    body: SelectionReport
    scored: list[Scored]
    plan: CVPlan
    winner: Scored
    complete: bool
    # the listed entries' all-rows design and fit, in rank order (plot data needs no refit)
    fits: tuple[Entry, ...] = ()


def run_selection(
    prep: Prepared,
    opts: SearchOptions,
    service_version: str,
) -> SelectionReport:
    """Search, score and rank; returns the contract's selection body (without service_version)."""
    return select(prep, opts, service_version).body


def select(
    prep: Prepared,
    opts: SearchOptions,
    service_version: str,
) -> Selection:
    """Search, score and rank (:class:`Selection`)."""
    t0 = time.perf_counter()
    deadline = opts.clock()
    resp = cand.response_candidates(prep, opts.response_transforms)
    if not resp:
        raise InputError.at(ResponseChoice(), f"no response transform applies to '{prep.response}'")
    preds = cand.predictor_candidates(prep, opts.predictor_transforms)
    n_params = 1 + sum(
        1 if p[0].name != "categorical" else len(set(prep.categorical[c].tolist())) - 1
        for p, c in zip(preds, prep.predictors, strict=True)
    )
    check_rows(prep, opts, n_params)
    plan = make_plan(
        prep.n, opts.folds, opts.repeats, opts.seed, opts.metric, opts.scheme, prep.order
    )
    _check_levels(prep, plan)
    shift_needed = tr.needs_shift(prep.y)
    warnings: list[str] = []
    uniform = prep.n < SMALL_N and opts.predictor_transforms is None and opts.strategy != "screened"
    if uniform:
        preds = _uniform_options(prep, preds)
        warnings.append(
            f"With {prep.n} rows (fewer than {SMALL_N}) the cross-validated errors of many "
            "candidates cannot be told apart, so the default search put every numeric "
            "predictor on one scale (all untransformed, or all logged where a log applies) "
            "for each response scale; send transforms.predictors to search other "
            "combinations."
        )

    # Box-Cox lambda on the untransformed design: reported, and its ladder rung tried.
    lambdas = KeptLambdas()  # all-rows lambdas with intervals, asked for more than once
    box_cox_info, screen_lams = _response_lambdas(prep, opts, resp, warnings, lambdas)
    # Box-Tidwell powers per fixed response scale: reported, their ladder rungs tried.
    power_fits = cand.PowerFits()  # the screening step's fits, reused by equal candidates
    # the search leaves the band members' entries and the listed entries' White tests
    # their estimated time (at most a share of the time left), so the answer arrives
    # within the limit; the screening estimates may use at most a share of what remains,
    # so that candidates are still scored when there are many predictors and rows
    reserve = listing_seconds(prep.n, n_params, lead_members(opts), opts.top)
    reserve_cap = max(deadline.left(), 0.0) * LISTING_SHARE
    search_by = deadline.reserving(min(reserve, reserve_cap))
    screen_by = search_by.sooner(max(search_by.left(), 0.0) * SCREEN_SHARE)
    unscreened: list[str] = []
    bt_info, bt_powers = cand.screening_powers(
        prep, preds, resp, opts.intercept, opts.seed, screen_by, power_fits, unscreened
    )
    if unscreened:
        n_open = sum(any(map(bt.is_open, o)) for o in preds)
        warnings.append(
            f"The power of {count_of(len(unscreened), 'predictor')} of {n_open} "
            f"({', '.join(unscreened[:5])}{', ...' if len(unscreened) > 5 else ''}) was not "
            f"estimated before the screening step's share of the time limit of "
            f"{deadline.limit_s:g} s ran out, so the ladder rungs "
            "next to those powers were not tried; raise limits.time_limit_s to try them."
        )
    preds = cand.add_ladder_rungs(prep, preds, bt_info)
    total = cand.grid_size(resp, preds)
    if uniform:
        total = len(resp) * len({tuple(t.name for t in c) for c in _uniform_combos(preds)})
    strategy = (
        opts.strategy
        if opts.strategy != "auto"
        else ("exhaustive" if total <= EXHAUSTIVE_LIMIT else "screened")
    )
    screen_scales = _screen_scales(prep, resp, screen_lams)
    extra: dict[tuple[Any, ...], np.ndarray] = {}
    if strategy == "screened":
        for (t, col), a in bt_powers.items():
            extra[("bt", screen_scales.get(t, t), col)] = bt.concrete_transform(a).forward(
                prep.numeric[col]
            )
    index = FoldIndex.of(plan, prep.n)
    space = cand.build_space(prep, preds, index, opts.intercept, extra)
    scorer = Scorer(space.bank, prep.y, plan, shift_needed)
    ev = _Evaluator(prep, space, scorer, opts.intercept, power_fits, lambdas)
    budget = Budget(opts.max_candidates, deadline, opts.stop, reserve, reserve_cap, opts.top)
    counts = {"screened": 0}
    if strategy == "exhaustive":
        complete = _exhaustive(prep, resp, preds, opts, ev, budget, total, uniform)
    else:
        counts = screened_search(
            prep,
            resp,
            preds,
            space,
            ev,
            budget,
            screen_scales,
            opts.intercept,
            ev.many,
            batch_size(prep.n, plan.n_splits),
        )
        complete = False
    scored, failures, n_fail = ev.scored, ev.failures, ev.n_fail
    considered = len(scored) + n_fail
    if not scored:
        if considered == 0:
            raise BudgetError(
                f"no candidate finished within the time limit of "
                f"{opts.time_limit_s:g} s; raise limits.time_limit_s or send fewer rows"
            )
        reasons = sorted({f.reason for f in failures})
        raise ModelFailure("no candidate could be fitted: " + "; ".join(reasons[:3]))
    if n_fail:
        grouped = failure_groups(ev.reasons)
        shown = "; ".join(g.text() for g in grouped[:3])
        more = f"; {count_of(len(grouped) - 3, 'other reason')}" if len(grouped) > 3 else ""
        warnings.append(
            f"{count_of(n_fail, 'candidate')} could not be scored and "
            f"{'is' if n_fail == 1 else 'are'} left out of the ranking ({shown}{more}; "
            "see search.failure_reasons)."
        )

    scored = list(scored)  # the search's own count; reading estimates may score ladder rungs
    listable, read_notes, scales_info = distinct_scales(scored, ev, prep, plan, shift_needed)
    band = Band.of(listable)
    ranked, _ = rank(listable, plan.folds, band)
    cache: dict[SpecKey, Entry] = {}

    def full(s: Scored, parts: ScoreParts) -> Entry:
        key = s.spec.key
        if key not in cache:
            made = entry_for(s.spec, s.cv, plan, prep, parts, opts, service_version, white=False)
            if key in ev.powers or key in read_notes:
                est = made.report.estimates or Estimates()
                est = replace(
                    est,
                    predictor_powers=ev.powers.get(key),
                    read_as_ladder=tuple(read_notes.get(key, ())),
                )
                made = replace(made, report=replace(made.report, estimates=est))
            cache[key] = made
        return cache[key]

    # the listed entries' folds are scored again after the members (CV+): their time is kept
    keep = min(budget.rescore_seconds(), reserve_cap)
    ranked, met, assessed = _order_by_conditions(ranked, full, opts, warnings, deadline, keep)
    best = min(scored, key=lambda s: s.cv.value)
    entries: list[EntryReport] = []
    fits: list[Entry] = []
    first: Entry | None = None
    winner: Scored | None = None
    for s, parts in ranked:
        if len(entries) >= opts.top:
            break
        try:
            # White's test only for the entries listed, in the time left
            listed = with_white(full(s, parts), prep, opts.alpha, deadline.left() - keep)
        except CandidateFailure as exc:
            warnings.append(
                f"A specification that scored in cross-validation could not be "
                f"fitted on all rows and is left out: {exc.reason}"
            )
            continue
        i = len(entries)
        # CV+ fits only for the entries returned (the band's assessed members need none)
        entry = attach_cv_plus(
            listed.report, listed.design, *ev.out_of_fold(s, deadline), prep, plan
        )
        first = first or listed
        winner = winner or s
        if parts.conditions is None:
            conditions = entry.conditions
            count = ConditionCount(
                tuple(failed_for_ranking(conditions, met)), tuple(failed(conditions))
            )
            parts = replace(parts, conditions=count)
        entries.append(replace(entry, score=replace(entry.score, parts=parts), rank=i + 1))
        fits.append(listed)
    if not entries:
        raise ModelFailure(
            "no scored specification could be fitted on all rows; "
            "see the warnings of a smaller search"
        )
    incumbent_block = None
    if opts.incumbent is not None:
        incumbent_block = _incumbent(
            opts, prep, plan, shift_needed, listable, ranked, entries, band, cache
        )
    elapsed = time.perf_counter() - t0
    complete = bool(complete and len(scored) + n_fail == total)
    box_cox = None
    if box_cox_info is not None:
        assert first is not None  # listed with entries[0]
        box_cox = _box_cox_context(box_cox_info, entries[0], first.design, prep, lambdas)
    search = SearchSummary(
        considered=int(total),
        scored=len(scored),
        failed=n_fail,
        screened=int(counts["screened"]),
        complete=complete,
        elapsed_s=round(elapsed, 4),
        strategy=StrategyReport(strategy, budget.spent),
        response_transforms=tuple(resp),
        predictor_transforms=tuple(zip(prep.predictors, map(tuple, preds), strict=True)),
        best_cv=BestCV(best.cv.value, best.cv.std_error, best.spec),
        band=BandReport.of(band, assessed, opts.alpha, met),
        distinct_scales=scales_info,
        failures=tuple(failures),
        failure_reasons=tuple(failure_groups(ev.reasons)),
        exact_refits=int(sum(s.cv.exact_refits for s in scored)),
        box_cox=box_cox,
        predictor_powers=_powers_block(bt_info) if bt_info else None,
    )
    if strategy == "screened":
        warnings.append(
            f"The candidate space holds {total} specifications, too many to score each; a "
            f"screened search scored {len(scored) + n_fail} of them on the original scale "
            f"(after screening {counts['screened']} on the model scale, see search.strategy). "
            "A specification it did not score may predict better; review the ranking."
        )
        if budget.spent in ("time_limit_s", "max_candidates"):
            warnings.append(f"The screened search stopped at limits.{budget.spent}.")
    elif not complete:
        warnings.append(
            f"The search stopped early ({len(scored) + n_fail} of {total} candidates "
            "scored within the limits); the ranking is the best found so far."
        )
    body = SelectionReport(
        prep.data_summary(), search, tuple(entries), tuple(warnings), incumbent_block
    )
    assert winner is not None  # listed with entries[0]
    return Selection(body, listable, plan, winner, complete, tuple(fits))


def _incumbent(
    opts: SearchOptions,
    prep: Prepared,
    plan: CVPlan,
    shift_needed: bool,
    scored: list[Scored],
    ranked: list[tuple[Scored, ScoreParts]],
    entries: list[EntryReport],
    band: Band | None = None,
    made: dict[SpecKey, Entry] | None = None,
) -> incumbent.IncumbentDecision:
    """The keep/switch decision; the incumbent's conditions are those of its entry when
    the search made one (``made``), else of one made here (without White's test, which
    the decision does not read)."""
    assert opts.incumbent is not None  # called only for a request with an incumbent
    spec, why = incumbent.incumbent_spec(
        opts.incumbent.spec, prep, prep.predictors, set(prep.table_columns)
    )
    inc_cv = None
    conditions = None
    if spec is not None:
        try:
            inc_cv = incumbent.score(spec, prep, plan, shift_needed)
        except CandidateFailure as exc:
            why = exc.reason
    position = None
    if spec is not None and inc_cv is not None:
        for i, (s, _) in enumerate(ranked):
            if s.spec.key == spec.key:
                position = i + 1
                break
        if position is None:
            again, _ = rank([*scored, Scored(spec, inc_cv)], plan.folds, band)
            position = next(i + 1 for i, (s, _) in enumerate(again) if s.spec is spec)
        try:
            kept = (made or {}).get(spec.key)
            conditions = (
                kept or entry_for(spec, inc_cv, plan, prep, ranked[0][1], opts, "", white=False)
            ).report.conditions
        except CandidateFailure:
            conditions = None
    winner = ranked[0][0]
    return incumbent.decide(
        spec,
        inc_cv,
        why,
        position,
        entries[0],
        winner.cv.fold_values,
        plan,
        conditions,
        opts.incumbent.as_sent,
    )


BAND_SOURCE = src.ONE_SE_BAND
CONDITIONS_SOURCE = src.BAND_CONDITIONS


@dataclass(frozen=True)
class Band:
    """The one band of a request: lowest CV error plus the standard error of that candidate."""

    lowest: float
    std_error: float
    threshold: float
    metric: str = "rmse"

    @classmethod
    def of(cls, scored: list[Scored]) -> Band:
        best = min(scored, key=lambda s: (s.cv.value, s.spec.simplicity()))
        se = float(best.cv.std_error) if math.isfinite(best.cv.std_error) else 0.0
        return cls(float(best.cv.value), se, float(best.cv.value) + se, best.cv.metric)


#: how the band orders candidates (stated with it in ``search.band``)
BAND_RULE = (
    "candidates whose cross-validated error is at most the lowest error plus the "
    "standard error of the lowest-error candidate form the band; inside it the "
    "simplest ranks first (fewer parameters estimated from the response, then "
    "the readability cost, then fewer transformed columns, then lower error), "
    "then fewer failed regression conditions among the leading band members; "
    "outside it candidates follow by error"
)
#: how failed conditions reorder the band's leading members
BAND_CONDITIONS_RULE = (
    "a condition reorders the compared band members when one of them fails it "
    "clearly, its deciding test (RESET, Shapiro-Wilk or Jarque-Bera, "
    "Breusch-Pagan, Breusch-Godfrey; threshold rules for multicollinearity and "
    "influence) rejecting at alpha divided by the number of conditions tested "
    "times the number of members compared, and another meets it; then it counts "
    "against every member that does not meet it at alpha. So a band whose members "
    "all meet every condition is reordered by chance with probability at most "
    "alpha, tests reported only never decide, and a condition no member meets "
    "describes the data, not a scale, and reorders nothing"
)


@dataclass(frozen=True)
class BandReport:
    """The band as reported once per request: its numbers and how failed conditions
    reordered its first ``members_compared`` members (``ordering``: the conditions that
    did, in the order of :data:`CONDITION_NAMES`)."""

    band: Band
    members_compared: int
    ordering: tuple[str, ...]
    alpha: float

    @classmethod
    def of(cls, band: Band, members: int, alpha: float, ordering: frozenset[str]) -> BandReport:
        return cls(band, members, tuple(c for c in CONDITION_NAMES if c in ordering), alpha)


def band_order(
    cv: list[float], simplicity: list[tuple[int, int, int]], threshold: float
) -> list[int]:
    """Positions in ranking order: band members by (simplicity, error), then the rest by error."""
    idx = range(len(cv))
    inside = sorted((i for i in idx if cv[i] <= threshold), key=lambda i: (simplicity[i], cv[i], i))
    outside = sorted((i for i in idx if cv[i] > threshold), key=lambda i: (cv[i], simplicity[i], i))
    return inside + outside


def condition_order(
    order: list[int], inside: list[bool], n_failed: dict[int, int], lead: int
) -> list[int]:
    """Re-order the first ``lead`` band members of ``order`` by failed conditions, then by
    their place in ``order``; everything else keeps its place after them."""
    band = [i for i in order if inside[i]][:lead]
    pos = {i: k for k, i in enumerate(order)}
    head = sorted(band, key=lambda i: (n_failed[i], pos[i]))
    chosen = set(band)
    return head + [i for i in order if i not in chosen]


def dominates(a: tuple[float, tuple[int, ...], int], b: tuple[float, tuple[int, ...], int]) -> bool:
    """``a`` = (cv, simplicity tuple, failed count) dominates ``b``: at least as simple on
    every count, strictly lower error, no more failed conditions."""
    return all(x <= y for x, y in zip(a[1], b[1], strict=True)) and a[0] < b[0] and a[2] <= b[2]


def simplicity_parts(spec: Specification) -> Simplicity:
    return Simplicity.of(spec)


@dataclass(frozen=True)
class Place:
    """A candidate's place in the one-band ranking: whether it is inside the band, how far
    its CV error is from the lowest and the paired standard error of that difference."""

    scored: Scored
    within_band: bool
    difference_from_best: float
    paired_std_error: float


def places(scored: list[Scored], folds: int | None = None, band: Band | None = None) -> list[Place]:
    """``scored`` in the one band's order (:class:`Band`): inside it by simplicity then
    error, outside by error.  ``paired_std_error`` (the standard error of the fold-by-fold
    differences from the lowest-error candidate) is for information only; it does not
    decide the band."""
    band = band or Band.of(scored)
    best = min(scored, key=lambda s: (s.cv.value, s.spec.simplicity()))
    k = folds or max(len(best.cv.fold_values), 1)

    # every candidate's fold-by-fold differences from the lowest at once (std_error_of each)
    diffs = np.array([s.cv.fold_values for s in scored], dtype=float) - best.cv.fold_values
    if diffs.shape[1] < 2:
        paired = [band.std_error] * len(scored)
    else:
        paired = std_errors_of(diffs, k).tolist()
    cvs = [s.cv.value for s in scored]
    order = band_order(cvs, [s.spec.simplicity() for s in scored], band.threshold)
    return [
        Place(
            scored[i],
            scored[i].cv.value <= band.threshold,
            scored[i].cv.value - band.lowest,
            0.0 if scored[i] is best else paired[i],
        )
        for i in order
    ]


#: the rule that placed a candidate inside / outside the band (its score parts' ``rule``)
IN_BAND_RULE = (
    "inside the band (CV error at most the lowest plus the standard error of "
    "the lowest-error candidate); ranked there by simplicity, then error"
)
OUT_OF_BAND_RULE = (
    "outside the band (CV error above the lowest plus the standard error of "
    "the lowest-error candidate); ranked by CV error"
)


def rank(
    scored: list[Scored], folds: int | None = None, band: Band | None = None
) -> tuple[list[tuple[Scored, ScoreParts]], float]:
    """Order by one band (:func:`places`), each candidate with its score parts.

    Every entry's ``parts`` carries the same threshold.  Returns the ordered (scored,
    score parts) pairs and the lowest CV error.
    """
    band = band or Band.of(scored)
    out = []
    for pl in places(scored, folds, band):
        s, within = pl.scored, pl.within_band
        parts = ScoreParts(
            cv_value=s.cv.value,
            cv_std_error=s.cv.std_error,
            best_cv_value=band.lowest,
            difference_from_best=pl.difference_from_best,
            paired_std_error=pl.paired_std_error,
            one_se_threshold=band.threshold,
            within_one_se=within,
            simplicity=simplicity_parts(s.spec),
            rule=IN_BAND_RULE if within else OUT_OF_BAND_RULE,
        )
        out.append((s, parts))
    return out, band.lowest


def lead_members(opts: SearchOptions) -> int:
    """How many leading band members have their conditions compared."""
    return max(3 * opts.top, 15)


#: seconds of one band member's all-rows entry without White's test (fit, conditions,
#: readings, model) per row and design column, and a fixed part: 1.5 times what the 2-core
#: development machine took (1.0e-6 s per row and column at 10,000 rows x 31 columns,
#: 30,000 x 21 and 100,000 x 6; 0.02 s at 300 x 6)
ENTRY_S_PER_CELL = 1.5e-6
ENTRY_FIXED_S = 0.03
#: the listed entries may take at most this share of the time left from the search
LISTING_SHARE = 0.25


def listing_seconds(n: int, k: int, members: int, listed: int) -> float:
    """Estimated seconds of the work after the search on ``n`` rows and ``k`` design
    columns: the all-rows entries of ``members`` band members and White's test of the
    ``listed`` ones (:func:`~service.core.conditions.white_seconds`)."""
    entry = ENTRY_FIXED_S + ENTRY_S_PER_CELL * n * k
    return members * entry + listed * white_seconds(n, k)


def _order_by_conditions(
    ranked: list[tuple[Scored, ScoreParts]],
    full: Callable[[Scored, ScoreParts], Entry],
    opts: SearchOptions,
    warnings: list[str],
    deadline: Deadline | None = None,
    keep_s: float = 0.0,
) -> tuple[list[tuple[Scored, ScoreParts]], frozenset[str], int]:
    """Re-order the leading band members by failed conditions (see condition_rules.py);
    also returns the conditions that took part and the number of members compared.

    Past the first ``top`` members, a member is assessed only while ``deadline`` leaves
    time for one more entry as slow as the slowest so far besides ``keep_s`` (kept for the
    work after it); the ones left out keep their place after the compared members and a
    warning says so."""
    band = [i for i, (_, p) in enumerate(ranked) if p.within_one_se][: lead_members(opts)]
    n_failed: dict[int, int] = {}
    parts_of = [p for _, p in ranked]
    conds: dict[int, ConditionReport | None] = {}
    slowest = 0.0
    for m, i in enumerate(band):
        if deadline is not None and m >= opts.top and deadline.left() - keep_s < slowest:
            warnings.append(
                f"The regression conditions of {m} of the band's {len(band)} leading "
                f"members were compared before the time limit of {deadline.limit_s:g} s "
                "ran out; the others keep their order by simplicity after them. Raise "
                "limits.time_limit_s to compare them all."
            )
            band = band[:m]
            break
        s, parts = ranked[i]
        t0 = time.perf_counter()
        try:
            conds[i] = full(s, parts).report.conditions
        except CandidateFailure as exc:
            parts_of[i] = replace(parts, conditions=ConditionCount(None, note=exc.reason))
            n_failed[i] = len(CONDITION_NAMES) + 1
        slowest = max(slowest, time.perf_counter() - t0)
    lead_m = len(band)
    met = ordering_conditions(list(conds.values()), opts.alpha)
    for i, cond in conds.items():
        bad = failed_for_ranking(cond, met)
        parts_of[i] = replace(
            parts_of[i], conditions=ConditionCount(tuple(bad), tuple(failed(cond)))
        )
        n_failed[i] = len(bad)
    order = condition_order(
        list(range(len(ranked))), [p.within_one_se for _, p in ranked], n_failed, lead_m
    )
    out = [(ranked[i][0], parts_of[i]) for i in order]
    lowest = min(ranked, key=lambda t: t[0].cv.value)[0]
    if out and out[0][0] is not lowest:
        low_parts = next(p for s, p in out if s is lowest)
        if low_parts.conditions_failed:
            warnings.append(
                "The specification with the lowest cross-validated error "
                f"({lowest.spec.response_label()} on "
                + ", ".join(p.transform.label(p.column) for p in lowest.spec.predictors)
                + f", {lowest.cv.metric} {lowest.cv.value:.4g}) fails "
                + ", ".join(c.replace("_", " ") for c in low_parts.conditions_failed)
                + "; it ranks below specifications in the band that pass more conditions."
            )
    return out, met, len(conds)


def _uniform_options(prep: Prepared, preds: list[list[tr.Transform]]) -> list[list[tr.Transform]]:
    """Small samples: each numeric predictor keeps identity and, where it applies, log."""
    out: list[list[tr.Transform]] = []
    for c, o in zip(prep.predictors, preds, strict=True):
        if c in prep.categorical:
            out.append(o)
            continue
        x = prep.numeric[c]
        keep = [tr.Transform("identity")]
        lg = tr.Transform("log")
        if lg.domain_problem(x, c, "predictor") is None:
            keep.append(fit_transform(lg, x))
        out.append(keep)
    return out


def _uniform_combos(preds: list[list[tr.Transform]]) -> list[tuple[tr.Transform, ...]]:
    """All predictors untransformed, and all logged where a log is an option."""
    plain = tuple(o[0] for o in preds)
    logged = tuple(next((t for t in o if t.name == "log"), o[0]) for o in preds)
    return [plain] if logged == plain else [plain, logged]


#: candidates scored in one batch at most, and rows x splits x candidates per batch
MAX_BATCH = 64
BATCH_WORK = 1_000_000
#: the same for the exhaustive search's fixed list with few splits: its candidates on one
#: response scale are scored together (batchcv), so a larger batch spares calls at about the
#: same time between two looks at the clock (3,000 rows x 5 folds: 266 candidates, about
#: 0.15 s).  With many splits a batch's time is the folds' own overhead, whatever its
#: rows: there the batches stay as small as :func:`batch_size` makes them
GRID_BATCH = 512
GRID_WORK = 4_000_000
GRID_MAX_SPLITS = 20


def batch_size(n: int, splits: int, most: int = MAX_BATCH, work: int = BATCH_WORK) -> int:
    """Candidates per batched scoring: small enough that the deadline is still asked often
    (about ``work`` rows x splits x candidates between two looks at the clock; one at a
    time for large tables or many folds)."""
    return max(1, min(most, work // max(n * splits, 1)))


def grid_batch_size(n: int, splits: int) -> int:
    """Candidates per batch of the exhaustive search (GRID_BATCH / GRID_WORK up to
    GRID_MAX_SPLITS splits, else :func:`batch_size`'s)."""
    if splits > GRID_MAX_SPLITS:
        return batch_size(n, splits)
    return batch_size(n, splits, GRID_BATCH, GRID_WORK)


def _exhaustive(
    prep: Prepared,
    resp: list[tr.Transform],
    preds: list[list[tr.Transform]],
    opts: SearchOptions,
    ev: _Evaluator,
    budget: Budget,
    total: int,
    uniform: bool = False,
) -> bool:
    """Score every candidate, simplest first, until a limit; True when nothing was left out."""
    cands: list[Specification] = []
    combos: Iterable[tuple[tr.Transform, ...]] = (
        ((r, *c) for r in resp for c in _uniform_combos(preds))
        if uniform
        else itertools.product(resp, *preds)
    )
    for combo in combos:
        spec = cand.make_spec(prep, combo[0], combo[1:], opts.intercept)
        if not cand.allowed(spec):
            continue
        cands.append(spec)
        if len(cands) >= max(opts.max_candidates * 4, 20000):
            break
    cands = _simplicity_sorted(cands)[: opts.max_candidates]
    step = grid_batch_size(prep.n, ev.scorer.plan.n_splits)
    start = 0
    while start < len(cands):
        if not budget.in_time():
            return False
        part = cands[start : start + budget.batch(step)]  # what fits in the time left
        start += len(part)
        t0 = time.perf_counter()
        ev.many(part)
        budget.took(len(part), time.perf_counter() - t0)
    if len(cands) < total:
        budget.spent = "max_candidates"
    return len(cands) == total


def _response_lambdas(
    prep: Prepared,
    opts: SearchOptions,
    resp: list[tr.Transform],
    warnings: list[str],
    lambdas: KeptLambdas,
) -> tuple[LambdaOnDesign | None, dict[tr.Transform, float]]:
    """Box-Cox (reported, its ladder rung added to ``resp``) and screening lambdas, all rows."""
    base = Specification(
        prep.response,
        tr.Transform("identity"),
        tuple(
            PredictorSpec(
                c,
                tr.Transform("categorical") if c in prep.categorical else tr.Transform("identity"),
            )
            for c in prep.predictors
        ),
        opts.intercept,
    )
    info: LambdaOnDesign | None = None
    lams: dict[tr.Transform, float] = {}
    families = [t for t in resp if t.needs_lambda]
    if not families:
        return None, lams
    try:
        X0 = build_design(base, prep).X
    except CandidateFailure:
        return None, lams
    for t in families:
        try:
            est = lambdas.estimate(t.name, prep.y, X0)
        except (CandidateFailure, ValueError):
            continue
        lams[t] = est.lam
        if t.name != "box_cox":
            continue
        info = LambdaOnDesign("untransformed predictors", est)
        if est.ladder is not None:
            rung = tr.ladder_transform(est.ladder)
            if rung not in resp and rung.domain_problem(prep.y, prep.response, "response") is None:
                resp.append(rung)
        if est.ci_low is None or est.ci_high is None or (est.ci_high - est.ci_low) > 2.0:
            warnings.append(
                "The data do not pin down a Box-Cox lambda for the response "
                f"(estimate {est.lam:.3g}, 95% interval "
                f"{_fmt_ci(est.ci_low, est.ci_high)}); prefer a simple scale."
            )
    return info, lams


def _screen_scales(
    prep: Prepared, resp: list[tr.Transform], lams: dict[tr.Transform, float]
) -> dict[tr.Transform, tr.Transform]:
    """The fixed model scale each response transform is screened on."""
    out: dict[tr.Transform, tr.Transform] = {}
    for t in resp:
        if t.needs_lambda:
            if t in lams:
                out[t] = tr.Transform(t.name, lam=lams[t])
            continue
        out[t] = fit_transform(t, prep.y)
    return out


def _box_cox_context(
    info: LambdaOnDesign,
    first: EntryReport,
    design: Design,
    prep: Prepared,
    lambdas: KeptLambdas,
) -> BoxCoxReport:
    """The reported Box-Cox lambda and, when rank 1's response scale is not what it
    suggests, lambda again on rank 1's design, with one sentence saying that lambda depends
    on the predictor scales."""
    t = first.specification.response_transform
    lad = info.estimate.ladder
    suggested = tr.ladder_transform(lad) if lad is not None else None
    same = (
        t.name == "box_cox"
        if suggested is None
        else (t.name == suggested.name and t.exponent == suggested.exponent)
    )
    if same or not np.all(prep.y > 0):
        return BoxCoxReport(info)
    try:
        est = lambdas.estimate("box_cox", prep.y, design.X)
    except (CandidateFailure, ValueError):
        return BoxCoxReport(info)
    preds = ", ".join(p.transform.label(p.column) for p in first.specification.predictors)
    holds = (
        f", which holds {est.ladder:g} ({tr.ladder_transform(est.ladder).label(prep.response)})"
        if est.ladder is not None
        else ""
    )
    reported = info.estimate
    return BoxCoxReport(
        info,
        LambdaOnDesign(preds, est),
        (
            f"The Box-Cox lambda {reported.lam:.3g} (95% interval "
            f"{_fmt_ci(reported.ci_low, reported.ci_high)}) "
            f"was estimated with the predictors untransformed, and lambda depends on the "
            f"predictor scales: on rank 1's predictors ({preds}) it is {est.lam:.3g} (95% "
            f"interval {_fmt_ci(est.ci_low, est.ci_high)}){holds}."
        ),
    )


#: how each search strategy goes (stated in ``search.strategy``)
STRATEGY_TEXT = {
    "exhaustive": "every candidate scored, simplest first, until a limit",
    "screened": (
        "screen predictor scales per response scale by coordinate descent on the "
        "model-scale cross-validated error (from Gram matrices), score the baselines "
        "(all untransformed, all logged, every response scale) and the best screened "
        "combinations on the original scale, then coordinate descent on the "
        "original-scale error"
    ),
}


@dataclass(frozen=True)
class StrategyReport:
    """The strategy a search used, the grid size up to which it scores every candidate and
    the limit that stopped it, if one did (``stopped_by``: ``time_limit_s``,
    ``max_candidates`` or None)."""

    name: str
    stopped_by: str | None
    exhaustive_limit: int = EXHAUSTIVE_LIMIT

    @property
    def description(self) -> str:
        return STRATEGY_TEXT[self.name]


def _powers_block(
    info: dict[tuple[tr.Transform, str], bt.PowerSummary],
) -> dict[str, list[ScreenedPower]]:
    out: dict[str, list[ScreenedPower]] = {}
    for (t, col), summ in info.items():
        out.setdefault(col, []).append(ScreenedPower(t, summ))
    return out


def _fmt_ci(lo: float | None, hi: float | None) -> str:
    a = "below -5" if lo is None else f"{lo:.3g}"
    b = "above 5" if hi is None else f"{hi:.3g}"
    return f"[{a}, {b}]"


def _check_levels(prep: Prepared, plan: CVPlan) -> None:
    for j, col in enumerate(prep.predictors):
        if col not in prep.categorical:
            continue
        vals = prep.categorical[col]
        for a in plan.assignments:
            for k in range(plan.folds):
                train_levels = set(vals[a != k].tolist())
                missing = set(vals.tolist()) - train_levels
                if missing:
                    lv = sorted(missing)[0]
                    cnt = int(np.sum(vals == lv))
                    raise InputError.at(
                        Predictor(j),
                        (
                            f"level '{lv}' of '{col}' has {count_of(cnt, 'row')}, so some cross-validation "
                            "training fold never sees it; merge rare levels or use fewer folds"
                        ),
                    )


# ----------------------------------------------------------------- distinct scales
MAX_EXAMINED = 60  # estimated candidates read against the ladder per request (design choice)


def _has_estimate(spec: Specification) -> bool:
    return spec.simplicity()[0] > 0


def _ladder_reading(
    e: Scored, ev: _Evaluator, prep: Prepared, positive: bool
) -> tuple[Specification | None, list[LadderReading]]:
    """(open or fixed specification read on the ladder, notes) or (None, []) when no
    estimate of ``e`` has a ladder value inside its 95% interval."""
    spec = e.spec
    t = spec.response_transform
    notes: list[LadderReading] = []
    if t.name in tr.LAMBDA_NAMES and (t.lam is None or t.estimated):
        try:
            est = ev.lambdas.estimate(t.name, prep.y, build_design(spec, prep).X)
        except (CandidateFailure, ValueError):
            return None, []
        if est.ladder is None:
            return None, []
        if t.name == "box_cox" or positive or est.ladder == 1.0:
            rung = tr.ladder_transform(est.ladder)  # Yeo-Johnson with lambda 1 is the identity
        else:
            rung = tr.Transform("yeo_johnson", lam=float(est.ladder))
        notes.append(LadderReading(est, rung.label(prep.response), e.cv.value))
        return Specification(spec.response, rung, spec.predictors, spec.intercept), notes
    powers = ev.powers.get(spec.key)
    if not powers:
        return None, []
    new: list[PredictorSpec] = []
    for p in (e.open_spec or e.spec).predictors:
        summ = powers.get(p.column) if bt.is_open(p.transform) else None
        if summ is None or summ.ladder is None:
            new.append(p)
            continue
        rung = tr.ladder_transform(summ.ladder)
        if rung.name == "log":
            rung = fit_transform(rung, prep.numeric[p.column])
        notes.append(
            LadderReading(replace(summ, per_fold=None), rung.label(p.column), e.cv.value, p.column)
        )
        new.append(PredictorSpec(p.column, rung))
    if not notes:
        return None, []
    return Specification(spec.response, spec.response_transform, tuple(new), spec.intercept), notes


def _score_fixed(
    spec: Specification, ev: _Evaluator, prep: Prepared, plan: CVPlan, shift_needed: bool
) -> Scored | None:
    try:
        got = ev(spec)
    except KeyError:  # a ladder column the bank does not hold: score it directly
        try:
            got = Scored(spec, incumbent.score(spec, prep, plan, shift_needed))
        except (CandidateFailure, InputError):
            return None
        ev.scored.append(got)
    return got


def distinct_scales(
    scored: list[Scored], ev: _Evaluator, prep: Prepared, plan: CVPlan, shift_needed: bool
) -> tuple[list[Scored], dict[SpecKey, list[LadderReading]], ScalesSummary]:
    """The candidates that may be listed: one per set of scales.

    An estimate (response lambda, predictor power) whose 95% interval holds a ladder
    value (-1, -0.5, 0, 0.5, 1, 2) is read as that ladder value: the estimated
    candidate gives way to the ladder candidate (scored if the search had not), whose
    entry keeps the estimate under ``estimates.read_as_ladder``.  An estimated scale
    that is not a ladder value stays only when its CV error beats the best ladder
    (fixed-scale) candidate by more than that candidate's standard error.  On a strictly
    positive response only the better of Box-Cox and Yeo-Johnson with the same
    predictors stays.  Returns (listable, {key: notes}, summary for ``search``).
    """
    by_key: dict[SpecKey, Scored] = {}
    for s in scored:
        if s.spec.key not in by_key or s.cv.value < by_key[s.spec.key].cv.value:
            by_key[s.spec.key] = s
    positive = bool(np.min(prep.y) > 0)
    fixed = {k: s for k, s in by_key.items() if not _has_estimate(s.spec)}
    est = sorted((s for s in by_key.values() if _has_estimate(s.spec)), key=lambda s: s.cv.value)
    ref = min(fixed.values(), key=lambda s: s.cv.value) if fixed else None
    limit = ref.cv.value + ref.cv.std_error if ref is not None else math.inf
    examined = [e for e in est if e.cv.value <= limit][:MAX_EXAMINED]
    notes: dict[SpecKey, list[LadderReading]] = {}
    still: list[Scored] = []
    read = 0
    for e in examined:
        target, why = _ladder_reading(e, ev, prep, positive)
        if target is None:
            still.append(e)
            continue
        if _has_estimate(target):  # some powers read on the ladder, others still estimated
            try:
                got = ev(target)
            except KeyError:  # a ladder column the bank does not hold: the estimate stays
                got = None
            if got is None:
                still.append(e)
                continue
            notes.setdefault(got.spec.key, []).extend(why)
            still.append(got)
            read += 1
            continue
        got = fixed.get(target.key) or _score_fixed(target, ev, prep, plan, shift_needed)
        if got is None:
            still.append(e)
            continue
        fixed[target.key] = got
        notes.setdefault(target.key, []).extend(why)
        read += 1
    ref = min(fixed.values(), key=lambda s: s.cv.value) if fixed else None
    kept = [e for e in still if ref is None or e.cv.value < ref.cv.value - ref.cv.std_error]
    if positive:  # Box-Cox or Yeo-Johnson with the same predictors, not both
        best_of: dict[tuple[tr.Transform, ...], Scored] = {}
        for e in kept:
            if e.spec.response_transform.name in tr.LAMBDA_NAMES:
                k = tuple(p.transform for p in e.spec.predictors)
                if k not in best_of or e.cv.value < best_of[k].cv.value:
                    best_of[k] = e
        kept = [
            e
            for e in kept
            if e.spec.response_transform.name not in tr.LAMBDA_NAMES
            or best_of[tuple(p.transform for p in e.spec.predictors)] is e
        ]
    listable = list(fixed.values()) + kept
    summary = ScalesSummary(read, len(kept), len(est) - read - len(kept))
    return listable, notes, summary
