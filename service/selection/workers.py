"""Spread independent pieces of work (groups, resamples, outer folds) over worker processes.

``map_in_processes(fn, items, processes)`` has the shape of ``map`` and returns a
list in input order, so it can be the ``mapper`` of :func:`groups.run_grouped` or
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

from threadpoolctl import threadpool_limits

_T = TypeVar("_T")
_R = TypeVar("_R")

_PRELOAD = ["service.selection.search", "service.selection.trust"]


def _context() -> BaseContext:
    methods = multiprocessing.get_all_start_methods()
    if "forkserver" in methods:
        ctx = multiprocessing.get_context("forkserver")
        ctx.set_forkserver_preload(_PRELOAD)  # workers start with numpy/scipy imported
        return ctx
    return multiprocessing.get_context("spawn")


def _init_worker(blas_threads: int) -> None:
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
