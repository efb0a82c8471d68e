"""One selection end to end, shared by the routes, the report, the command line and batch
months: the rows, the search (one table or one per group), trust, and the finishing touches
(signatures, cautions, version).

What it is given is typed and frozen (:class:`SelectionJob`: the table and its columns, the
:class:`SearchOptions`, the trust measures, the group limit; :class:`Service`: what the
running service adds), built from a request by ``service/api/options.py``, which has
already checked every limit it can see in the request.  Nothing here knows HTTP: a group
that cannot be modelled is a :class:`~service.selection.groups.GroupFailure` (its
:class:`~service.core.errors.ErrorRecord`), which the caller renders.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass, field, replace
from typing import Any, Protocol, TypeVar

from ..core.data import Prepared, prepare
from ..core.errors import InputError, Option
from ..core.model import Signing
from . import workers
from .cautions import selection_cautions
from .entries import Entry
from .groups import GroupedReport, run_grouped
from .search import SelectionReport, select
from .search_setup import SearchOptions
from .trust import assess_trust

#: a finished selection body: one table's, or one per group
Body = TypeVar("Body", SelectionReport, GroupedReport)

#: ``mapper(fn, items)``: the results of ``fn`` over ``items``, in order
Mapper = Callable[[Callable[[Any], Any], Iterable[Any]], Iterable[Any]]


class Progress(Protocol):
    """Progress of a grouped selection (the command line's bar): the number of groups, then
    one step per finished group."""

    total: int

    def step(self) -> None: ...


@dataclass(frozen=True, slots=True)
class TableColumns:
    """The table as sent (the contract's Data object) and the part each column plays."""

    data: Mapping[str, Any]
    response: str
    predictors: tuple[str, ...]
    categorical: tuple[str, ...] = ()
    order: str | None = None
    group_by: str | None = None

    def prepare(self) -> Prepared:
        """The rows, typed and cleaned (missing rows dropped and listed)."""
        return prepare(
            dict(self.data),
            self.response,
            list(self.predictors),
            list(self.categorical),
            self.order,
            self.group_by,
        )


@dataclass(frozen=True, slots=True)
class TrustOptions:
    """The optional stability and optimism measures of the whole selection."""

    stability: bool = False
    optimism: bool = False
    resamples: int | None = None  # None: trust.DEFAULT_RESAMPLES

    @property
    def wanted(self) -> bool:
        return self.stability or self.optimism


@dataclass(frozen=True, slots=True)
class SelectionJob:
    """Everything one selection is given.  ``max_groups`` is the most group values a
    ``group_by`` request may have (None: no limit, as in a batch month)."""

    table: TableColumns
    search: SearchOptions = field(default_factory=SearchOptions)
    trust: TrustOptions = field(default_factory=TrustOptions)
    max_groups: int | None = None


@dataclass(frozen=True, slots=True)
class Service:
    """What the running service adds to every selection: its version, the keys that sign
    model artifacts (None: issued unsigned) and the processes a grouped request may use."""

    version: str
    model_keys: tuple[str, dict[str, bytes]] | None = None
    group_processes: int = 1
    blas_threads: int = 1


def check_groups(n_groups: int, column: str, limit: int | None) -> None:
    """Refuse a ``group_by`` column with more values than ``limit`` (the one check of the
    group limit: it needs the prepared rows, so it runs here rather than with the request's
    other limits)."""
    if limit is not None and n_groups > limit:
        raise InputError.at(
            Option("group_by"),
            f"'{column}' has {n_groups} values; at most "
            f"{limit} groups are accepted per request (setting "
            "BESTSCALE_MAX_GROUPS); split the job over several requests",
        )


@dataclass(frozen=True, eq=False)
class Worked:
    """A selection ``body`` with what it was computed from: the prepared rows (``prep``)
    and, for a selection without groups, the listed entries' all-rows fits (``fits``, rank 1
    first), so that plot data needs neither a second preparation nor a refit."""

    body: SelectionReport | GroupedReport
    prep: Prepared
    fits: tuple[Entry, ...] = ()


def run_selection(
    job: SelectionJob,
    service: Service,
    *,
    progress: Progress | None = None,
    group_mapper: Mapper | None = None,
    per_group_time_limit: bool = False,
) -> SelectionReport | GroupedReport:
    """The selection body of ``job`` (:func:`work_selection`'s body)."""
    return work_selection(
        job,
        service,
        progress=progress,
        group_mapper=group_mapper,
        per_group_time_limit=per_group_time_limit,
    ).body


def work_selection(
    job: SelectionJob,
    service: Service,
    *,
    progress: Progress | None = None,
    group_mapper: Mapper | None = None,
    per_group_time_limit: bool = False,
) -> Worked:
    """The selection of ``job``, with its rows and listed fits (:class:`Worked`).  ``group_mapper(fn, items)``, when given, runs the
    groups of a ``group_by`` request (the command line's Dask cluster), in order.  Every part
    of the work asks ``job.search.clock()``: the request's one deadline when it has one;
    with ``per_group_time_limit`` (the command line's ``--group-by``: a month of segments,
    not one request) the time limit counts for each group from that group's start instead.
    Groups that cannot be modelled are a ``GroupFailure`` holding their ``ErrorRecord``."""
    opts = job.search
    prep = job.table.prepare()
    if job.table.group_by is not None:
        if job.trust.wanted:
            raise InputError.at(
                Option("trust"),
                "trust measures are computed for one selection; send "
                "each group as its own request to measure them",
            )
        assert prep.groups is not None  # prepared with group_by
        n_groups = len(set(prep.groups.tolist()))
        check_groups(n_groups, job.table.group_by, job.max_groups)
        mapper = _group_mapper(n_groups, service, progress, group_mapper)
        if per_group_time_limit:
            opts = replace(opts, deadline=None)
        grouped = opts
        per_group = run_grouped(
            prep,
            grouped,
            service.version,
            finish=lambda b: finish_body(b, grouped, service),
            mapper=mapper,
        )
        return Worked(finish_body(per_group, grouped, service), prep)
    result = select(prep, opts, service.version)
    body = result.body
    if job.trust.wanted:
        trust = assess_trust(
            prep,
            opts,
            result.winner.spec,
            service.version,
            job.trust.stability,
            job.trust.optimism,
            job.trust.resamples,
            selection=result,
        )
        body = replace(body, trust=trust)
    return Worked(finish_body(body, opts, service), prep, result.fits)


def _group_mapper(
    n_groups: int, service: Service, progress: Progress | None, group_mapper: Mapper | None
) -> Mapper:
    """How the groups run: the caller's mapper, the service's process pool, or in this
    process; each reports its finished groups to ``progress``."""
    if progress is not None:
        progress.total = n_groups
    if group_mapper is not None:
        each = group_mapper

        def mapped_with_progress(fn: Callable[[Any], Any], items: Iterable[Any]) -> Iterable[Any]:
            for result in each(fn, items):
                yield result
                if progress is not None:
                    progress.step()

        return mapped_with_progress
    if service.group_processes > 1:
        return workers.process_mapper(
            service.group_processes,
            service.blas_threads,
            on_result=progress.step if progress is not None else None,
        )
    if progress is not None:
        bar = progress

        def serial_with_progress(fn: Callable[[Any], Any], items: Iterable[Any]) -> Iterable[Any]:
            for item in items:
                yield fn(item)
                bar.step()

        return serial_with_progress
    return map


def finish_body(body: Body, opts: SearchOptions, service: Service) -> Body:
    """``body`` with its models marked to be signed with the service's keys (the web floor
    writes and signs each artifact), the service version and the cautions that apply."""
    ranking = body.ranking
    any_tr = any(not e.specification.response_transform.is_identity for e in ranking)
    keys = service.model_keys
    signed = tuple(
        e if isinstance(e.model, Signing) else replace(e, model=Signing(e.model, keys))
        for e in ranking
    )
    cautions = tuple(selection_cautions(opts.metric, any_tr))
    return replace(body, ranking=signed, service_version=service.version, cautions=cautions)
