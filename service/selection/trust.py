"""How far to trust a selection: how stable the choice is, and how much the search flatters it.

**Stability.** Rows are resampled with replacement (the bootstrap, Efron 1979) and
the ranking is decided again on every resample; ``stability`` is the share of
usable resamples in which the returned rank-1 specification is still first, with
a Wilson (1927) score interval for that share.  The specification first most
often otherwise is the runner-up.  Each resample is cross-validated with grouped
folds: the distinct drawn rows are split into K folds and every copy of a row
stays in its row's fold, so a row is never trained on and predicted at once.
To keep the cost bounded, resamples re-score the *contenders* only: the
candidates whose cross-validated error on all rows is within
``CONTENDER_SE`` paired standard errors of the lowest (at most
``MAX_CONTENDERS``, in ranking order, always with the winner).  A candidate
further away would need its paired difference to shrink by more than two of its
standard errors to enter the one-standard-error band, so leaving it out changes
the share by little (design choice, stated in the output).  Response lambdas
and shifts are estimated again inside every fold, as in the search; a candidate
with an estimated predictor power is left out of the resamples unless it is
rank 1 (the public cross-validation takes a fixed design, so its power would
keep its all-rows value, which flatters it against its neighbours).  Each
resample applies the search's rule: the one band (lowest error plus its standard
error) with the simplicity order (:func:`search.rank`), then the leading band members re-ordered
by failed regression conditions (the rule of ``condition_rules.py``), with the condition
verdicts assessed once on all rows.

**Optimism.** Nested cross-validation (Stone 1974; Varma & Simon 2006, "Bias in
error estimation when using cross-validation for model selection", BMC
Bioinformatics 7:91): the outer folds are the search's own partition (repeat 0 of
its plan when the outer fold count equals the search's); inside every outer training
part the whole search (:func:`search.select`, with its Box-Cox rung,
one-standard-error band and condition re-ordering) is run again, and the
specification it selects is refitted on that training part and scored on the
held-out outer fold on the original response scale. The pooled held-out error
estimates the error of the selection *procedure*; the winner's error on the same
outer folds is what the search reports for it. ``gap`` = nested minus winner: how
much choosing among many candidates flatters the winner (Cawley & Talbot 2010, "On
over-fitting in model selection and subsequent selection bias in performance
evaluation", JMLR; volume and pages 11:2079-2107 from memory). The inner search is
reduced (``DEFAULT_INNER_FOLDS`` folds, one repeat) to keep the cost near two
searches; the candidate space is never reduced, because a smaller space would
understate the optimism.

Cost (``tests/benchmarks/trust.py`` prints it as multiples of the search on the
same data): stability takes ``resamples * contenders`` candidate scorings on n
rows (defaults 20 x at most 8); optimism takes ``outer_folds`` searches on
(K-1)/K of the rows with ``inner_folds`` instead of K folds (about
``outer_folds * inner_folds / K * (K-1)/K`` searches, 2.4 with the defaults).
Each part stops at its time limit and then says so (``complete``).

Everything is seeded from the request's seed; the same request gives the same
numbers whatever the number of worker processes (``mapper``).

:func:`assess_trust` returns a :class:`Trust` (with :class:`Stability` and
:class:`Optimism`), frozen and picklable (groups run in worker processes);
``service/api/render/trust.py`` writes its contract form.
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable
from dataclasses import dataclass, replace
from typing import Any, TypeAlias

import numpy as np

from ..core import sources as src
from ..core import transforms as tr
from ..core._types import Mapper
from ..core.condition_rules import conditions_for, failed_for_ranking, ordering_conditions
from ..core.conditions import CONDITION_NAMES, ConditionReport
from ..core.crossval import cross_validate
from ..core.cvresult import pooled_folds, std_error_of
from ..core.data import Prepared
from ..core.errors import BestscaleError, CandidateFailure, InputError, Option
from ..core.folds import CVPlan, make_plan
from ..core.spec import Specification, SpecKey, build_design
from .deadline import Deadline
from .entries import fitted_model
from .search import Selection, places, select
from .search_setup import Scored, SearchOptions

DEFAULT_RESAMPLES = 20
MAX_RESAMPLES = 1000
CONTENDER_SE = 3.0  # contenders: within this many paired standard errors of the lowest error
MAX_CONTENDERS = 8
DEFAULT_INNER_FOLDS = 3
UNSTABLE_BELOW = 0.8  # design choice: below this share the warning says the choice is not settled
OPTIMISM_WARN_RATIO = 1.05  # design choice: nested error 5% above the winner's gets a warning
INTERVAL_LEVEL = 0.95  # of the Wilson interval of the stability share
_STABILITY_STREAM = 1  # separates the bootstrap stream from any other use of the seed
_WILSON_Z = 1.959963984540054  # standard normal 0.975 quantile

#: what the stability block states about its method (stated with it)
STABILITY_METHOD = "bootstrap of rows (grouped folds: copies of a row are held out together)"
STABILITY_SOURCE = src.BOOTSTRAP
CONTENDER_RULE = (
    f"candidates within {CONTENDER_SE:g} paired standard errors of the "
    f"lowest cross-validated error on all rows (at most {MAX_CONTENDERS}); "
    "the others are taken never to be first"
)
CONDITIONS_HELD = "assessed once on all rows; resamples vary the cross-validated part"
HELD_FIXED = (
    "response lambdas and shifts are estimated again in every fold; "
    "candidates with an estimated predictor power are left out of the "
    "resamples (their power would be held at its all-rows value, which "
    "flatters them)"
)
HELD_FIXED_RANK_1 = ", except rank 1, whose power is held at its all-rows value"
RUNNER_UP_FIRST = "first most often among the resamples where rank 1 was not"
RUNNER_UP_NEXT = "never first in a resample; next in the cross-validated ranking on all rows"
#: what the optimism block states about its method
OPTIMISM_SOURCE = src.NESTED_CV
OPTIMISM_MEANING = (
    "selected_cv is rank 1's error on the outer folds; nested_cv repeats the "
    "whole search inside each outer training part and scores what it selects on "
    "the held-out fold; gap = nested_cv - selected_cv, positive when the search "
    "flatters rank 1"
)


# --------------------------------------------------------------------------- results
@dataclass(frozen=True)
class RunnerUp:
    """The specification that would most often be first instead of rank 1: ``first_share``
    of the usable resamples, and on what ``basis`` it was chosen (a sentence)."""

    spec: Specification
    first_share: float
    basis: str


@dataclass(frozen=True)
class FirstShare:
    """A contender that was first in some resamples, with its share of the usable ones."""

    spec: Specification
    share: float


@dataclass(frozen=True)
class ResampleProblem:
    """Why ``resamples`` resamples could not be ranked (one ``reason``)."""

    reason: str
    resamples: int


@dataclass(frozen=True)
class Stability:
    """The bootstrap measure: rank 1 was first in ``wins`` of ``usable`` resamples
    (``share``; None when none was usable) out of ``requested``; ``not_run`` were cut by
    the time limit.  ``first`` lists every contender that was first, most often first;
    ``contenders`` were re-scored (``estimated_powers_left_out`` near candidates with an
    estimated predictor power were not; ``rank_1_power_held``: rank 1 has one, held at
    its all-rows value); ``rule_reproduces_rank_1``: the resampled rule picks rank 1 on
    all rows."""

    share: float | None
    runner_up: RunnerUp | None
    requested: int
    usable: int
    not_run: int
    wins: int
    first: tuple[FirstShare, ...]
    contenders: int
    folds: int
    seed: int
    estimated_powers_left_out: int
    rank_1_power_held: bool
    rule_reproduces_rank_1: bool
    problems: tuple[ResampleProblem, ...]

    @property
    def failed(self) -> int:
        return sum(p.resamples for p in self.problems)

    @property
    def complete(self) -> bool:
        return self.not_run == 0

    @property
    def interval(self) -> tuple[float, float] | None:
        """Wilson score interval of ``share`` at :data:`INTERVAL_LEVEL`."""
        return wilson_interval(self.wins, self.usable)


@dataclass(frozen=True)
class OuterFold:
    """One outer fold of the nested cross-validation: ``rows_held_out``, the specification
    the inner search ``selected`` and the held-out errors of it and of rank 1, or the
    ``problem`` that stopped it (``selected`` may still be known)."""

    fold: int
    rows_held_out: int
    selected: Specification | None = None
    problem: str | None = None
    same_as_winner: bool = False
    inner_complete: bool = False
    nested_error: float | None = None
    winner_error: float | None = None


@dataclass(frozen=True)
class Optimism:
    """The nested cross-validation: rank 1's pooled error on the outer folds
    (``selected_cv``) and that of the whole search repeated inside them (``nested_cv``),
    both None when no outer fold could be assessed (then ``problem`` says why).  ``folds``
    is None when the outer folds were never reached."""

    metric: str
    outer_folds: int
    inner_folds: int
    seed: int
    selected_cv: float | None = None
    nested_cv: float | None = None
    gap_std_error: float | None = None
    outer_folds_used: int = 0
    winner_selected: int = 0
    complete: bool = False
    folds: tuple[OuterFold, ...] | None = None
    problem: str | None = None

    @property
    def gap(self) -> float | None:
        """``nested_cv - selected_cv``: positive when the search flatters rank 1."""
        if self.nested_cv is None or self.selected_cv is None:
            return None
        return self.nested_cv - self.selected_cv

    @property
    def ratio(self) -> float | None:
        if self.nested_cv is None or self.selected_cv is None or not self.selected_cv > 0:
            return None
        return self.nested_cv / self.selected_cv


@dataclass(frozen=True)
class Trust:
    """How far to trust the returned rank 1: the measures asked for (None when not asked or
    the request was stopped), the time limit they ran under, warnings and elapsed time."""

    stability: Stability | None
    optimism: Optimism | None
    time_limit_s: float
    warnings: tuple[str, ...]
    elapsed_s: float


# --------------------------------------------------------------------------- helpers
#: an estimated predictor power, whatever value a fit gave it
_ESTIMATED_POWER = "estimated power"
ScaleKey: TypeAlias = tuple[str, tr.Transform, tuple[tuple[str, tr.Transform | str], ...], bool]


def _as_written(t: tr.Transform) -> tr.Transform:
    """``t`` as its object form reads it back (a log's shift of 0 and an unset shift are
    both written as a plain log): transforms that are written alike are one candidate."""
    return tr.read_back(t)


def _open_response(t: tr.Transform) -> tr.Transform:
    """A response transform with what the search estimates from the response left open."""
    return _as_written(replace(t, lam=None, shift=None, estimated=False) if t.estimated else t)


def _open_predictor(t: tr.Transform) -> tr.Transform | str:
    """A predictor transform with an estimated power left open (a log's shift comes from
    the column alone)."""
    if t.estimated and (t.name == "power" or (t.name == "log" and not t.shift)):
        return _ESTIMATED_POWER
    return _as_written(t)


def scale_key(spec: Specification) -> ScaleKey:
    """A specification's scale with parameters estimated from the response left open.

    ``box_cox`` with an estimated lambda, a log whose shift was chosen from the
    response and an estimated predictor power are the same candidate whatever
    values a fit produced, so a ranking entry (concrete values) matches the
    candidate it came from.
    """
    return (
        spec.response,
        _open_response(spec.response_transform),
        tuple((p.column, _open_predictor(p.transform)) for p in spec.predictors),
        spec.intercept,
    )


def has_estimated_power(spec: Specification) -> bool:
    """True when a predictor's power was estimated from the response (Box-Tidwell)."""
    return any(_open_predictor(p.transform) == _ESTIMATED_POWER for p in spec.predictors)


def label(spec: Specification) -> str:
    """``log(cost) on log(length), age, soil``."""
    return (
        spec.response_label()
        + " on "
        + ", ".join(p.transform.label(p.column) for p in spec.predictors)
    )


def wilson_interval(wins: int, n: int, z: float = _WILSON_Z) -> tuple[float, float] | None:
    """Wilson (1927, JASA 22:209-212) score interval for a binomial share."""
    if n <= 0:
        return None
    p = wins / n
    den = 1.0 + z * z / n
    centre = (p + z * z / (2 * n)) / den
    half = z / den * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n))
    return (max(0.0, centre - half), min(1.0, centre + half))


def _find(scored: list[Scored], key: ScaleKey) -> Scored | None:
    for s in scored:
        if scale_key(s.spec) == key:
            return s
    return None


# --------------------------------------------------------------------------- stability
@dataclass
class _StabilityJob:
    """Everything a resample needs, picklable for worker processes."""

    y: np.ndarray
    designs: list[tuple[np.ndarray, list[str]]]  # per contender: (X on all rows, names)
    specs: list[Specification]
    folds: int
    metric: str
    seed: int
    lead: int  # band members re-ordered by conditions (search: max(3 * top, 15))


def _one_resample(job: _StabilityJob, b: int) -> list[int] | str:
    """Band members (contender indices, ranking order) of resample ``b``, or why it failed."""
    rng = np.random.default_rng([job.seed, _STABILITY_STREAM, b])
    n = job.y.size
    idx = rng.integers(0, n, size=n)
    distinct = np.unique(idx)
    if distinct.size < 2 * job.folds:
        return f"only {distinct.size} distinct rows were drawn"
    # grouped folds over the distinct rows: every copy of a row is held out together
    fold_of = make_plan(
        distinct.size, job.folds, 1, int(rng.integers(0, 2**32)), job.metric
    ).assignments[0]
    plan = CVPlan(job.folds, 1, job.seed, job.metric, (fold_of[np.searchsorted(distinct, idx)],))
    yb = job.y[idx]
    shift = tr.needs_shift(yb)
    scored: list[Scored] = []
    where: dict[int, int] = {}
    for i, (X, names) in enumerate(job.designs):
        try:
            cv = cross_validate(X[idx], yb, job.specs[i].response_transform, plan, shift, names)
        except CandidateFailure:
            continue
        s = Scored(job.specs[i], cv)
        where[id(s)] = i
        scored.append(s)
    if not scored:
        return "no contender could be fitted on the resample"
    return [where[id(pl.scored)] for pl in places(scored, job.folds) if pl.within_band][: job.lead]


def _resample_chunk(
    task: tuple[_StabilityJob, list[int], Deadline, Callable[[], bool] | None],
) -> list[Any]:
    """Worker: ``(job, resample indices, the request's deadline, stop)`` -> one result per
    index.  ``None`` marks a resample not run because the deadline passed.
    """
    job, indices, deadline, stop = task
    out: list[Any] = []
    gone = False
    for b in indices:
        gone = gone or (stop is not None and stop())
        if gone or deadline.passed():
            out.append(None)
            continue
        out.append(_one_resample(job, b))
    return out


def _chunks(items: list[int], parts: int) -> list[list[int]]:
    parts = max(1, min(parts, len(items)))
    size = math.ceil(len(items) / parts)
    return [items[i : i + size] for i in range(0, len(items), size)]


def _verdicts(
    prep: Prepared, alpha: float, band: list[Specification]
) -> Callable[[Specification], int]:
    """Failed-condition counts on all rows for the compared ``band`` members, by the rule
    of condition_rules.py (level and the conditions some member meets from ``band``)."""
    conds: dict[SpecKey, ConditionReport | None] = {}

    def conditions_of(spec: Specification) -> ConditionReport | None:
        if spec.key not in conds:
            try:
                _, design, fit, _ = fitted_model(spec, prep)
                conds[spec.key], _ = conditions_for(  # the ordering reads no White test
                    design, fit, prep, fit.fitted + fit.resid, alpha, white=False
                )
            except CandidateFailure:  # the search puts these last as well
                conds[spec.key] = None
        return conds[spec.key]

    met = ordering_conditions([conditions_of(spec) for spec in band], alpha)

    def n_failed(spec: Specification) -> int:
        cond = conditions_of(spec)
        if cond is None:
            return len(CONDITION_NAMES) + 1
        return len(failed_for_ranking(cond, met))

    return n_failed


def first_by_rule(
    band: list[tuple[int, Specification]], n_failed: Callable[[Specification], int]
) -> Specification:
    """Rank 1 of ``band`` ((position, spec) pairs in ranking order): fewest failed
    conditions, then band order (the rule of condition_rules.py)."""
    return min(band, key=lambda item: (n_failed(item[1]), item[0]))[1]


def _stability(
    prep: Prepared,
    opts: SearchOptions,
    scored: list[Scored],
    winner: Scored,
    resamples: int,
    deadline: Deadline,
    mapper: Mapper,
    chunks: int,
) -> Stability:
    ranked = places(scored, opts.folds)
    lead = max(3 * opts.top, 15)
    band_all = [pl.scored.spec for pl in ranked if pl.within_band][:lead]
    n_failed = _verdicts(prep, opts.alpha, band_all)
    matches = first_by_rule(list(enumerate(band_all)), n_failed).key == winner.spec.key

    # A candidate with an estimated predictor power is re-scored with its all-rows power
    # (cross_validate takes a fixed design), which flatters it against its neighbours; it
    # stays out of the resamples unless it is rank 1 itself.
    near = [
        pl.scored for pl in ranked if pl.difference_from_best <= CONTENDER_SE * pl.paired_std_error
    ]
    contenders = [s for s in near if s is winner or not has_estimated_power(s.spec)]
    left_out = sum(1 for s in near if s is not winner and has_estimated_power(s.spec))
    contenders = contenders[:MAX_CONTENDERS]
    if winner not in contenders:
        contenders = [winner, *contenders[: MAX_CONTENDERS - 1]]
    cache: dict[tuple[str, tr.Transform], np.ndarray] = {}
    designs: list[tuple[np.ndarray, list[str]]] = []
    specs = [s.spec for s in contenders]
    for spec in specs:
        d = build_design(spec, prep, cache)
        designs.append((d.X, d.names))
    job = _StabilityJob(prep.y, designs, specs, opts.folds, opts.metric, opts.seed, lead)
    stop = opts.stop if mapper is map else None  # a worker process cannot ask the caller
    tasks = [(job, part, deadline, stop) for part in _chunks(list(range(resamples)), chunks)]
    results = [r for chunk in mapper(_resample_chunk, tasks) for r in chunk]

    firsts: list[int] = []
    problems: dict[str, int] = {}
    not_run = 0
    for r in results:
        if r is None:
            not_run += 1
        elif isinstance(r, str):
            problems[r] = problems.get(r, 0) + 1
        else:
            chosen = first_by_rule([(pos, specs[i]) for pos, i in enumerate(r)], n_failed)
            firsts.append(specs.index(chosen))
    usable = len(firsts)
    w = contenders.index(winner)
    wins = sum(1 for f in firsts if f == w)
    counts: dict[int, int] = {}
    for f in firsts:
        counts[f] = counts.get(f, 0) + 1
    order = sorted(counts, key=lambda i: (-counts[i], i))
    others = [i for i in order if i != w]
    runner: RunnerUp | None
    if others:
        ru = others[0]
        runner = RunnerUp(specs[ru], counts[ru] / usable, RUNNER_UP_FIRST)
    else:
        second = next((pl.scored for pl in ranked if pl.scored is not winner), None)
        runner = None if second is None else RunnerUp(second.spec, 0.0, RUNNER_UP_NEXT)
    return Stability(
        share=wins / usable if usable else None,
        runner_up=runner,
        requested=resamples,
        usable=usable,
        not_run=not_run,
        wins=wins,
        first=tuple(FirstShare(specs[i], counts[i] / usable) for i in order),
        contenders=len(contenders),
        folds=opts.folds,
        seed=opts.seed,
        estimated_powers_left_out=left_out,
        rank_1_power_held=has_estimated_power(winner.spec),
        rule_reproduces_rank_1=matches,
        problems=tuple(ResampleProblem(k, v) for k, v in sorted(problems.items())),
    )


# --------------------------------------------------------------------------- optimism
@dataclass(frozen=True)
class _InnerPick:
    """What the search inside one outer training part selected (``spec``, and whether that
    search was ``complete``), or why it did not (``problem``)."""

    spec: Specification | None = None
    complete: bool = False
    problem: str | None = None


def _inner_search(task: tuple[Prepared, SearchOptions, str, Deadline]) -> _InnerPick:
    """Worker: the whole search on one outer training part, within the request's deadline;
    the selected candidate or why not."""
    sub, opts, service_version, deadline = task
    if deadline.passed():
        return _InnerPick(problem="not run: the time limit was reached")
    try:
        result = select(sub, replace(opts, deadline=deadline), service_version)
    except BestscaleError as exc:
        return _InnerPick(problem=exc.detail)
    return _InnerPick(result.winner.spec, result.complete)


def _optimism(
    prep: Prepared,
    opts: SearchOptions,
    winner: Scored,
    service_version: str,
    outer_folds: int,
    inner_folds: int,
    deadline: Deadline,
    mapper: Mapper,
) -> Optimism:
    inner_folds = min(inner_folds, opts.folds)
    outer = make_plan(prep.n, outer_folds, 1, opts.seed, opts.metric)
    assign = outer.assignments[0]
    sizes = np.bincount(assign, minlength=outer_folds).astype(float)
    metric = opts.metric
    base = Optimism(metric, outer_folds, inner_folds, opts.seed)
    if outer_folds == opts.folds:
        # the search's own partition (repeat 0 of its plan): rank 1's fold errors as scored,
        # with everything estimated from the response re-estimated in each training fold
        win_folds = np.asarray(winner.cv.fold_values[:outer_folds], dtype=float)
    else:
        try:
            d = build_design(winner.spec, prep)
            win_folds = cross_validate(
                d.X, prep.y, winner.spec.response_transform, outer, tr.needs_shift(prep.y), d.names
            ).fold_values
        except CandidateFailure as exc:
            return replace(
                base, problem=f"rank 1 cannot be scored on the outer folds: {exc.reason}"
            )
    inner = replace(opts, folds=inner_folds, repeats=1, top=1, incumbent=None)
    tasks = [
        (prep.take(np.flatnonzero(assign != k)), inner, service_version, deadline)
        for k in range(outer_folds)
    ]
    picks: list[_InnerPick] = list(mapper(_inner_search, tasks))

    evaluated: dict[tuple[ScaleKey, bool], np.ndarray | str] = {}
    rows: list[OuterFold] = []
    nested = np.full(outer_folds, np.nan)
    winner_key = scale_key(winner.spec)
    for k, pick in enumerate(picks):
        held_out = OuterFold(k + 1, int(sizes[k]))
        if pick.spec is None:
            rows.append(replace(held_out, problem=pick.problem))
            continue
        spec = pick.spec
        shift = tr.needs_shift(prep.y[assign != k])  # the family the inner search used
        key = (scale_key(spec), shift)
        if key not in evaluated:
            try:
                ds = build_design(spec, prep)
                evaluated[key] = cross_validate(
                    ds.X, prep.y, spec.response_transform, outer, shift, ds.names
                ).fold_values
            except CandidateFailure as exc:
                evaluated[key] = exc.reason
        res = evaluated[key]
        if isinstance(res, str):
            rows.append(
                replace(
                    held_out,
                    selected=spec,
                    problem=f"the selected specification cannot predict the held-out fold: {res}",
                )
            )
            continue
        nested[k] = res[k]
        rows.append(
            replace(
                held_out,
                selected=spec,
                same_as_winner=key[0] == winner_key,
                inner_complete=pick.complete,
                nested_error=float(res[k]),
                winner_error=float(win_folds[k]),
            )
        )
    ok = np.isfinite(nested)
    if not np.any(ok):
        return replace(
            base,
            folds=tuple(rows),
            problem="the search could not be repeated inside any outer training part",
        )
    diff = nested[ok] - win_folds[ok]
    return replace(
        base,
        selected_cv=pooled_folds(metric, win_folds[ok], sizes[ok]),
        nested_cv=pooled_folds(metric, nested[ok], sizes[ok]),
        gap_std_error=std_error_of(diff, diff.size) if diff.size > 1 else None,
        outer_folds_used=int(ok.sum()),
        winner_selected=sum(1 for r in rows if r.same_as_winner),
        complete=bool(np.all(ok)) and all(r.inner_complete for r in rows),
        folds=tuple(rows),
    )


# --------------------------------------------------------------------------- entry point
def assess_trust(
    prep: Prepared,
    opts: SearchOptions,
    winner_spec: Specification,
    service_version: str,
    stability: bool,
    optimism: bool,
    resamples: int | None = None,
    *,
    selection: Selection | None = None,
    outer_folds: int | None = None,
    mapper: Mapper = map,
    chunks: int = 1,
) -> Trust:
    """How far to trust the returned rank-1 specification ``winner_spec`` (as listed, or as
    scored: values estimated from the response do not matter).

    ``selection`` is what :func:`search.select` returned for ``prep`` and ``opts`` (its
    scored candidates are re-ranked; without it the search is run again).  ``resamples``
    (default ``DEFAULT_RESAMPLES``) bootstrap resamples measure stability; ``outer_folds``
    (default: the search's folds) and ``DEFAULT_INNER_FOLDS`` shape the nested
    cross-validation.  Every part ends by the request's deadline (``opts.deadline``; else
    ``opts.time_limit_s`` from this call); what the deadline cut short is stated
    (``complete``) and warned about.  ``mapper(fn, items)``
    may spread the resamples (in ``chunks`` parts) and the outer folds over worker
    processes; results do not depend on it.
    """
    t0 = time.perf_counter()
    if resamples is None:
        resamples = DEFAULT_RESAMPLES
    if not 1 <= resamples <= MAX_RESAMPLES:
        raise InputError.at(
            Option("trust.resamples"),
            f"resamples must be within [1, {MAX_RESAMPLES}], got {resamples}",
        )
    if outer_folds is not None and not 2 <= outer_folds <= prep.n // 2:
        raise InputError.at(
            Option("trust.outer_folds"),
            f"outer_folds must be within [2, {prep.n // 2}] for {prep.n} rows, got {outer_folds}",
        )
    k_out = opts.folds if outer_folds is None else int(outer_folds)
    # the request's one deadline (the search already spent part of it)
    end = opts.clock()
    if selection is None:
        selection = select(prep, replace(opts, top=1, incumbent=None), service_version)
    scored = selection.scored
    winner = _find(scored, scale_key(winner_spec))
    if winner is None:
        raise ValueError("winner_spec is not one of the scored candidates")
    st: Stability | None = None
    op: Optimism | None = None
    warnings: list[str] = []
    name = label(winner.spec)
    if stability and not opts.stopped():
        st = _stability(prep, opts, scored, winner, resamples, end, mapper, chunks)
        if st.share is None:
            warnings.append("Stability could not be measured: no resample could be ranked.")
        elif st.share < UNSTABLE_BELOW:
            ru = st.runner_up
            warnings.append(
                f"The choice is not settled: rank 1 ({name}) was first in {st.wins} of "
                f"{st.usable} bootstrap resamples ({st.share:.0%})"
                + (f"; {label(ru.spec)} was first in {ru.first_share:.0%}" if ru else "")
                + ". Weigh both before switching a production model."
            )
        if not st.rule_reproduces_rank_1:
            warnings.append(
                "On all rows the resampled rule does not pick the returned rank 1 "
                "(the condition ordering differs); read the stability with care."
            )
        if not st.complete:
            warnings.append(
                f"Stability used {st.usable} of {resamples} resamples before the "
                "time limit; its interval is wider than asked for."
            )
    if optimism and not opts.stopped():
        op = _optimism(prep, opts, winner, service_version, k_out, DEFAULT_INNER_FOLDS, end, mapper)
        if op.gap is None:
            warnings.append(
                "The optimism of the search could not be measured: "
                + (op.problem or "no outer fold could be assessed")
                + "."
            )
        elif op.ratio is not None and op.ratio > OPTIMISM_WARN_RATIO:
            warnings.append(
                f"The search flatters rank 1: its cross-validated {op.metric} is "
                f"{op.selected_cv:.4g}, but repeating the whole search inside each of "
                f"{op.outer_folds_used} outer folds gives {op.nested_cv:.4g} "
                f"({op.ratio - 1:.0%} higher); expect errors nearer the second figure on "
                "new data."
            )
        if op.gap is not None and not op.complete:
            warnings.append(
                "The nested cross-validation is incomplete (an inner search stopped "
                "early or an outer fold failed); see trust.optimism.folds."
            )
    return Trust(st, op, opts.time_limit_s, tuple(warnings), round(time.perf_counter() - t0, 4))
