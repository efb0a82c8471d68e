"""Spread independent pieces of work (groups, resamples, outer folds) over worker processes.

``map_in_processes(fn, items, processes)`` has the shape of ``map`` and returns a
list in input order, so it can be the ``mapper`` of :func:`search.run_grouped` or
of :func:`trust.assess_trust`; the results are the same whatever ``processes``
is, because every piece of work is seeded by its own inputs.

Processes come from the ``forkserver`` context where the platform has it (else
``spawn``): forking a server that runs a thread pool can copy a lock held by
another thread into the child and deadlock it.  ``fn`` must be a module-level
function and ``items`` picklable (``Prepared`` and ``SearchOptions`` are plain
dataclasses of arrays and numbers).  Each worker pins its BLAS to the given
number of threads, as the service does (``BESTSCALE_BLAS_THREADS``).  The pool
lives for one call; the forkserver that starts its workers stays up and holds only
imported modules, so no request leaves state behind.  On a machine whose cores are
already busy a pool cannot help and adds pickling and start-up
(``tests/benchmarks/groups.py`` measures it).
"""

from __future__ import annotations

import multiprocessing
from collections.abc import Callable, Iterable, Iterator
from concurrent.futures import ProcessPoolExecutor
from multiprocessing.context import BaseContext
from typing import Any, TypeVar

_T = TypeVar("_T")
_R = TypeVar("_R")

_PRELOAD = ["service.core.search", "service.core.trust"]


def _context() -> BaseContext:
    methods = multiprocessing.get_all_start_methods()
    if "forkserver" in methods:
        ctx = multiprocessing.get_context("forkserver")
        ctx.set_forkserver_preload(_PRELOAD)  # workers start with numpy/scipy imported
        return ctx
    return multiprocessing.get_context("spawn")


def _init_worker(blas_threads: int) -> None:
    from threadpoolctl import threadpool_limits

    threadpool_limits(limits=blas_threads)


def iter_in_processes(
    fn: Callable[[_T], _R], items: Iterable[_T], processes: int, blas_threads: int = 1
) -> Iterator[_R]:
    """``fn(x)`` for each of ``items``, in input order, as the results arrive.

    Runs in this process when ``processes <= 1`` or there is at most one item
    (no start-up cost).  An exception raised by ``fn`` is raised here.
    """
    items = list(items)
    if processes <= 1 or len(items) <= 1:
        for x in items:
            yield fn(x)
        return
    workers = min(int(processes), len(items))
    # a few chunks per worker: fewer round trips for many small items, still balanced
    chunksize = max(1, len(items) // (workers * 4))
    with ProcessPoolExecutor(
        max_workers=workers,
        mp_context=_context(),
        initializer=_init_worker,
        initargs=(blas_threads,),
    ) as pool:
        yield from pool.map(fn, items, chunksize=chunksize)


def map_in_processes(
    fn: Callable[[_T], _R], items: Iterable[_T], processes: int, blas_threads: int = 1
) -> list[_R]:
    """``[fn(x) for x in items]``, computed by up to ``processes`` worker processes.

    Results keep the input order; in this process for ``processes <= 1`` or a
    single item.
    """
    return list(iter_in_processes(fn, items, processes, blas_threads))


def process_mapper(
    processes: int, blas_threads: int = 1, on_result: Callable[[], object] | None = None
) -> Callable[[Callable[[Any], Any], Iterable[Any]], list[Any]]:
    """A ``mapper(fn, items)`` for ``run_grouped``/``assess_trust`` bound to a process count.

    ``on_result()`` is called after each result in input order (a progress bar).
    """

    def mapper(fn: Callable[[_T], _R], items: Iterable[_T]) -> list[_R]:
        out = []
        for r in iter_in_processes(fn, items, processes, blas_threads):
            out.append(r)
            if on_result is not None:
                on_result()
        return out

    return mapper


def select_group(task: tuple[Any, ...]) -> dict[str, Any]:
    """Worker for one group of :func:`search.run_grouped`.

    ``task`` is ``(prepared | problem, opts, version[, entry_hook[, trust[, deadline]]])``:
    the group's :class:`Prepared` (a group already known to be unusable arrives
    as its ``{"problem": ...}`` entry and is passed through), the search
    options, the service version, an optional module-level ``entry_hook``,
    optional trust settings ``(stability, optimism, resamples, outer_folds)``
    for :func:`trust.assess_trust`, and the request's wall-clock deadline
    (``time.time()`` value, shared by the processes of one machine): a group
    reached after it gets a 503 problem, one reached before it searches within
    what is left.  Returns the group's selection body without private keys, or
    a ``problem`` entry for an error the core raised on purpose.  Module-level,
    so it pickles.
    """
    import time
    from dataclasses import replace

    from .errors import BestscaleError, BudgetError
    from .search import _problem_of, run_selection

    sub, opts, service_version = task[:3]
    entry_hook = task[3] if len(task) > 3 else None
    trust = task[4] if len(task) > 4 else None
    deadline = task[5] if len(task) > 5 else None
    if isinstance(sub, dict):
        return sub
    if deadline is not None:
        remaining = deadline - time.time()
        if remaining <= 0:
            return {
                "problem": _problem_of(
                    BudgetError(
                        f"the request's time limit of {opts.time_limit_s:g} s ran out before this "
                        "group was reached; send fewer groups per request or raise limits.time_limit_s"
                    )
                )
            }
        opts = replace(opts, time_limit_s=remaining)
    try:
        body = run_selection(sub, opts, service_version, entry_hook)
        if trust is not None and (trust[0] or trust[1]):
            from .trust import assess_trust

            stability, optimism, resamples, outer_folds = trust
            body["trust"] = assess_trust(
                sub,
                opts,
                body["ranking"][0]["specification"],
                service_version,
                stability,
                optimism,
                resamples,
                selection=body,
                outer_folds=outer_folds,
            )
    except BestscaleError as exc:
        return {"problem": _problem_of(exc)}
    body.pop("_scored", None)
    body.pop("_plan", None)
    body["ranking"] = [
        {k: v for k, v in e.items() if not k.startswith("_")} for e in body["ranking"]
    ]
    return body
