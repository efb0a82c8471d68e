"""One selection per value of a group column: :func:`run_grouped` splits the table and
hands each group to :func:`select_group` through a ``mapper`` (in this process, a process
pool of :mod:`workers`, or a Dask cluster), each group within the request's one deadline."""

from __future__ import annotations

import time
from collections.abc import Callable, Iterable
from dataclasses import dataclass, replace
from typing import Any

from ..core.data import Prepared, split_groups
from ..core.errors import BestscaleError, BudgetError, ErrorRecord
from ..core.numbers import count_of
from .deadline import Deadline
from .search import select
from .search_setup import SearchOptions
from .trust import assess_trust


def group_parts(prep: Prepared) -> dict[str, Prepared | dict[str, Any]]:
    """The table split by the group column: each group's rows, or the ``{"problem":
    ErrorRecord}`` entry of a group already known to be unusable (as :func:`select_group`
    passes it on)."""
    return {
        name: {"problem": ErrorRecord.of(sub)} if isinstance(sub, BestscaleError) else sub
        for name, sub in split_groups(prep).items()
    }


def run_grouped(
    prep: Prepared,
    opts: SearchOptions,
    service_version: str,
    finish: Callable[[dict[str, Any]], dict[str, Any]] | None = None,
    mapper: Callable[[Callable[[Any], Any], Iterable[Any]], Iterable[Any]] = map,
) -> dict[str, Any]:
    """One selection per value of the group column.

    ``finish(body)`` completes each group's body (cautions etc.); ``mapper`` may be a
    pool's map to spread the groups over workers.  The groups share ``opts.deadline``
    (an HTTP request's); when it is None each group's time limit counts from its own start.  A group that cannot be modelled
    gets a ``problem`` entry with its reason (an :class:`ErrorRecord`, which the caller
    renders) while the others go on.
    """
    t0 = time.perf_counter()
    # the request's one deadline, shared by its groups; without one (a batch of segments)
    # every group starts its own from opts.time_limit_s
    deadline = opts.deadline
    parts = group_parts(prep)
    names = list(parts)
    tasks = [GroupTask(sub, opts, service_version, deadline=deadline) for sub in parts.values()]
    bodies = [
        b if ("problem" in b or finish is None) else finish(b) for b in mapper(select_group, tasks)
    ]
    failed = sum(1 for b in bodies if "problem" in b)
    return {
        "data": prep.data_summary(),
        "search": {
            "groups": len(names),
            "groups_failed": failed,
            "elapsed_s": round(time.perf_counter() - t0, 4),
            "complete": all("problem" not in b or not b["problem"].over_budget for b in bodies)
            and all(b["search"].complete for b in bodies if "problem" not in b),
        },
        "ranking": [],
        "groups": dict(zip(names, bodies, strict=True)),
        "warnings": [
            f"One selection per value of the group column ({len(names)} groups); each "
            "group's ranking is under 'groups'."
        ]
        + (
            [f"{count_of(failed, 'group')} could not be modelled; see their 'problem'."]
            if failed
            else []
        ),
    }


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

    ``rows`` is the group's :class:`Prepared` rows, or the ``{"problem": ErrorRecord}`` entry
    of a group already known to be unusable (passed through).  ``deadline`` is the request's
    one deadline: a group reached after it gets a 503 problem, one reached before it
    searches within what is left.
    """

    rows: Prepared | dict[str, Any]
    opts: SearchOptions
    service_version: str
    trust: GroupTrust | None = None
    deadline: Deadline | None = None


def select_group(task: GroupTask) -> dict[str, Any]:
    """Worker for one group of :func:`run_grouped`: the group's selection body without
    private keys, or a ``problem`` entry (:class:`ErrorRecord`) for an error the core raised
    on purpose.
    Module-level, and its task is a frozen dataclass, so both pickle."""
    sub, opts, service_version = task.rows, task.opts, task.service_version
    trust = task.trust
    if isinstance(sub, dict):
        return sub
    # the request's deadline, or (a batch segment) one started now for this group's search
    # and trust together
    deadline = task.deadline if task.deadline is not None else opts.clock()
    if deadline.passed():
        return {
            "problem": ErrorRecord.of(
                BudgetError(
                    f"the request's time limit of {opts.time_limit_s:g} s ran out before this "
                    "group was reached; send fewer groups per request or raise limits.time_limit_s"
                )
            )
        }
    opts = replace(opts, deadline=deadline)
    try:
        result = select(sub, opts, service_version)
        body = result.body
        if trust is not None and (trust.stability or trust.optimism):
            stability, optimism = trust.stability, trust.optimism
            resamples, outer_folds = trust.resamples, trust.outer_folds
            body["trust"] = assess_trust(
                sub,
                opts,
                body["ranking"][0]["specification"],
                service_version,
                stability,
                optimism,
                resamples,
                selection=result,
                outer_folds=outer_folds,
            )
    except BestscaleError as exc:
        return {"problem": ErrorRecord.of(exc)}
    return body
