"""One selection request end to end, shared by the routes, the report and the command line:
limits, options, the search (one table or one per group), trust, and the finishing touches
(signatures, cautions, version)."""

from __future__ import annotations

from collections.abc import Callable, Iterable
from dataclasses import replace
from typing import Any

from fastapi import Request

from ..core import transforms as tr
from ..core.data import prepare
from ..core.errors import InputError, Option, PredictorChoice, Predictors
from ..core.model import sign_all
from ..selection.cautions import selection_cautions
from ..selection.deadline import Deadline
from ..selection.groups import run_grouped
from ..selection.search import select
from ..selection.search_setup import SearchOptions
from ..settings import get_settings
from ..version import __version__
from .errors import with_group_problems
from .intake import check_table
from .schemas import SelectionRequest, transform_items


def _check_size(data: dict, n_columns: int) -> None:
    s = get_settings()
    check_table(data)
    if n_columns > s.max_columns:
        raise InputError.at(
            Predictors(),
            f"{n_columns} columns requested; at most "
            f"{s.max_columns} are accepted (setting BESTSCALE_MAX_COLUMNS)",
        )


def disconnect_probe(request: Request):
    """``() -> bool`` for a computing thread: True once the client has gone away.

    Runs ``request.is_disconnected`` on the event loop from the route's worker thread; the
    search asks it between candidates (at most a few times a second), so a caller that hung
    up frees its compute slot instead of holding it to the time limit.
    """
    import anyio.from_thread

    def gone() -> bool:
        try:
            return bool(anyio.from_thread.run(request.is_disconnected))
        except RuntimeError:  # not in a worker thread of the event loop
            return False

    return gone


def time_limit(req: SelectionRequest) -> float:
    """The request's time limit in seconds (the service default when omitted), checked."""
    s = get_settings()
    tl = req.limits.time_limit_s or s.default_time_limit_s
    if tl > s.max_time_limit_s:
        raise InputError.at(
            Option("limits.time_limit_s"),
            f"time_limit_s {tl:g} exceeds the service limit of {s.max_time_limit_s:g} s",
        )
    return float(tl)


def selection_options(
    req: SelectionRequest, stop=None, deadline: Deadline | None = None
) -> SearchOptions:
    """The request's search options; ``deadline`` (default: the time limit from now) is the
    request's one deadline, shared by the search, the entries, trust and every group."""
    s = get_settings()
    max_c = req.limits.max_candidates or s.default_max_candidates
    if max_c > s.max_candidates:
        raise InputError.at(
            Option("limits.max_candidates"),
            f"max_candidates {max_c} exceeds the service limit of {s.max_candidates}",
        )
    req.validation.check_scheme()
    tl = time_limit(req)
    return SearchOptions(
        response_transforms=transform_items(req.transforms.response),
        predictor_transforms=transform_items(req.transforms.predictors),
        folds=req.validation.folds,
        repeats=req.validation.repeats,
        seed=req.validation.seed,
        metric=req.validation.metric,
        scheme=req.validation.scheme,
        alpha=req.alpha,
        top=req.top,
        max_candidates=max_c,
        time_limit_s=tl,
        intercept=req.intercept,
        units=dict(req.units),
        strategy=req.strategy,
        incumbent=req.incumbent.as_dict() if req.incumbent is not None else None,
        deadline=deadline if deadline is not None else Deadline.after(tl),
        stop=stop,
    )


def run_selection_request(
    req: SelectionRequest,
    progress=None,
    stop=None,
    group_mapper=None,
    deadline: Deadline | None = None,
    per_group_time_limit: bool = False,
) -> dict:
    """The selection body for a validated request.  ``group_mapper(fn, items)``, when given,
    runs the groups of a ``group_by`` request (the command line's Dask cluster), in order.
    The request's time limit starts here (or at ``deadline``, a caller's clock started
    earlier) and bounds every part of its work; with ``per_group_time_limit`` (the command
    line's ``--group-by``: a month of segments, not one request) it counts for each group
    from that group's start instead."""
    if deadline is None:
        deadline = Deadline.after(time_limit(req))
    data = req.data.as_dict()
    _check_size(data, 1 + len(req.predictors))
    if req.transforms.predictors is not None and isinstance(req.transforms.predictors, dict):
        for col in req.transforms.predictors:
            if col not in req.predictors:
                raise InputError.at(PredictorChoice(col), f"'{col}' is not one of the predictors")
    prep = prepare(
        data, req.response, list(req.predictors), list(req.categorical), req.order, req.group_by
    )
    opts = selection_options(req, stop, deadline)
    if req.group_by is not None:
        if req.trust.stability or req.trust.optimism:
            raise InputError.at(
                Option("trust"),
                "trust measures are computed for one selection; send "
                "each group as its own request to measure them",
            )
        assert prep.groups is not None  # prepared with group_by
        n_groups = len(set(prep.groups.tolist()))
        limit = get_settings().max_groups
        if n_groups > limit:
            raise InputError.at(
                Option("group_by"),
                f"'{req.group_by}' has {n_groups} values; at most "
                f"{limit} groups are accepted per request (setting "
                "BESTSCALE_MAX_GROUPS); split the job over several requests",
            )
        mapper: Callable[..., Iterable[Any]] = map
        if progress is not None:
            progress.total = n_groups
        if group_mapper is not None:
            each = group_mapper

            def mapped_with_progress(fn, items):
                for result in each(fn, items):
                    yield result
                    if progress is not None:
                        progress.step()

            mapper = mapped_with_progress
        elif get_settings().group_processes > 1:
            from ..selection.workers import process_mapper

            mapper = process_mapper(
                get_settings().group_processes,
                get_settings().blas_threads,
                on_result=progress.step if progress is not None else None,
            )
        elif progress is not None:

            def serial_with_progress(fn, items):
                for item in items:
                    yield fn(item)
                    progress.step()

            mapper = serial_with_progress

        if per_group_time_limit:
            opts = replace(opts, deadline=None)
        body = run_grouped(
            prep, opts, __version__, finish=lambda b: finish_body(b, opts), mapper=mapper
        )
        return finish_body(with_group_problems(body), opts)
    result = select(prep, opts, __version__)
    body = result.body
    if req.trust.stability or req.trust.optimism:
        from ..selection.trust import assess_trust

        body["trust"] = assess_trust(
            prep,
            opts,
            body["ranking"][0]["specification"],
            __version__,
            req.trust.stability,
            req.trust.optimism,
            req.trust.resamples,
            selection=result,
        )
    return finish_body(body, opts)


def finish_body(body: dict, opts: SearchOptions) -> dict:
    any_tr = any(
        not tr.from_dict(e["specification"]["response"]["transform"]).is_identity
        for e in body.get("ranking", [])
    )
    sign_all(body, get_settings().model_keys())
    return {
        "service_version": __version__,
        **body,
        "cautions": selection_cautions(opts.metric, any_tr),
    }
