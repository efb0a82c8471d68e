"""One selection per value of a group column: :func:`run_grouped` splits the table and
hands each group to :func:`select_group` through a ``mapper`` (in this process, a process
pool of :mod:`workers`, or a Dask cluster), each group within the request's one deadline.

A group that cannot be modelled is a :class:`GroupFailure`; the grouped search's summary a
:class:`GroupsSummary` (``service/api/render/groups.py`` writes both)."""

from __future__ import annotations

import time
from collections.abc import Callable, Iterable
from dataclasses import dataclass, replace
from typing import Any

from ..core.data import DataSummary, Prepared, split_groups
from ..core.errors import BestscaleError, BudgetError, ErrorRecord
from ..core.numbers import count_of
from .deadline import Deadline
from .entries import EntryReport
from .search import SelectionReport, select
from .search_setup import SearchOptions
from .trust import assess_trust


@dataclass(frozen=True)
class GroupFailure:
    """A group that could not be modelled: the error the core raised on purpose, kept as
    data (``record``); the caller writes it as the group's problem object."""

    record: ErrorRecord


@dataclass(frozen=True)
class GroupsSummary:
    """The search of a grouped selection: how many ``groups``, how many ``failed``, the
    time it took and whether every group's search was ``complete`` (no group ran out of
    time, none stopped early)."""

    groups: int
    failed: int
    elapsed_s: float
    complete: bool


def group_parts(prep: Prepared) -> dict[str, Prepared | GroupFailure]:
    """The table split by the group column: each group's rows, or the
    :class:`GroupFailure` of a group already known to be unusable (as :func:`select_group`
    passes it on)."""
    return {
        name: GroupFailure(ErrorRecord.of(sub)) if isinstance(sub, BestscaleError) else sub
        for name, sub in split_groups(prep).items()
    }


def run_grouped(
    prep: Prepared,
    opts: SearchOptions,
    service_version: str,
    finish: Callable[[SelectionReport], SelectionReport] | None = None,
    mapper: Callable[[Callable[[Any], Any], Iterable[Any]], Iterable[Any]] = map,
) -> GroupedReport:
    """One selection per value of the group column.

    ``finish(body)`` completes each group's body (cautions etc.); ``mapper`` may be a
    pool's map to spread the groups over workers.  The groups share ``opts.deadline``
    (an HTTP request's); when it is None each group's time limit counts from its own start.
    A group that cannot be modelled is a :class:`GroupFailure` (which the caller renders)
    while the others go on.
    """
    t0 = time.perf_counter()
    # the request's one deadline, shared by its groups; without one (a batch of segments)
    # every group starts its own from opts.time_limit_s
    deadline = opts.deadline
    parts = group_parts(prep)
    names = list(parts)
    tasks = [GroupTask(sub, opts, service_version, deadline=deadline) for sub in parts.values()]
    bodies = [
        b if (isinstance(b, GroupFailure) or finish is None) else finish(b)
        for b in mapper(select_group, tasks)
    ]
    failures = [b for b in bodies if isinstance(b, GroupFailure)]
    failed = len(failures)
    searched = [b for b in bodies if not isinstance(b, GroupFailure)]
    summary = GroupsSummary(
        len(names),
        failed,
        round(time.perf_counter() - t0, 4),
        all(not f.record.over_budget for f in failures)
        and all(b.search.complete for b in searched),
    )
    warnings = [
        f"One selection per value of the group column ({len(names)} groups); each "
        "group's ranking is under 'groups'."
    ]
    if failed:
        warnings.append(f"{count_of(failed, 'group')} could not be modelled; see their 'problem'.")
    groups: dict[str, SelectionReport | GroupFailure | dict[str, Any]] = dict(
        zip(names, bodies, strict=True)
    )
    return GroupedReport(prep.data_summary(), summary, groups, tuple(warnings))


@dataclass(frozen=True)
class GroupedReport:
    """The body of a grouped selection: the rows used (``data``), the grouped search's
    summary, each group's selection body (or :class:`GroupFailure`; a caller may put its
    problem object in its place) by group value, the warnings and, once finished, the
    service version and the cautions.  Its own ranking is empty: each group has one."""

    data: DataSummary
    search: GroupsSummary
    groups: dict[str, SelectionReport | GroupFailure | dict[str, Any]]
    warnings: tuple[str, ...]
    service_version: str | None = None
    cautions: tuple[str, ...] | None = None

    ranking: tuple[EntryReport, ...] = ()


@dataclass(frozen=True)
class GroupTrust:
    """Trust settings of a group's selection (see :func:`trust.assess_trust`)."""

    stability: bool
    optimism: bool
    resamples: int | None = None
    outer_folds: int | None = None


@dataclass(frozen=True)
class GroupTask:
    """One group for :func:`select_group`.

    ``rows`` is the group's :class:`Prepared` rows, or the :class:`GroupFailure` of a group
    already known to be unusable (passed through).  ``deadline`` is the request's
    one deadline: a group reached after it gets a 503 problem, one reached before it
    searches within what is left.
    """

    rows: Prepared | GroupFailure
    opts: SearchOptions
    service_version: str
    trust: GroupTrust | None = None
    deadline: Deadline | None = None


def select_group(task: GroupTask) -> SelectionReport | GroupFailure:
    """Worker for one group of :func:`run_grouped`: the group's selection body without
    private keys, or a :class:`GroupFailure` for an error the core raised on purpose.
    Module-level, and its task is a frozen dataclass, so both pickle."""
    sub, opts, service_version = task.rows, task.opts, task.service_version
    trust = task.trust
    if isinstance(sub, GroupFailure):
        return sub
    # the request's deadline, or (a batch segment) one started now for this group's search
    # and trust together
    deadline = task.deadline if task.deadline is not None else opts.clock()
    if deadline.passed():
        return GroupFailure(
            ErrorRecord.of(
                BudgetError(
                    f"the request's time limit of {opts.time_limit_s:g} s ran out before this "
                    "group was reached; send fewer groups per request or raise limits.time_limit_s"
                )
            )
        )
    opts = replace(opts, deadline=deadline)
    try:
        result = select(sub, opts, service_version)
        body = result.body
        if trust is not None and (trust.stability or trust.optimism):
            stability, optimism = trust.stability, trust.optimism
            resamples, outer_folds = trust.resamples, trust.outer_folds
            measured = assess_trust(
                sub,
                opts,
                result.winner.spec,
                service_version,
                stability,
                optimism,
                resamples,
                selection=result,
                outer_folds=outer_folds,
            )
            body = replace(body, trust=measured)
    except BestscaleError as exc:
        return GroupFailure(ErrorRecord.of(exc))
    return body
