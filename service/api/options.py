"""A validated request turned into typed, frozen options, and every service limit checked.

Pydantic (``schemas.py``) has checked what a request may say on its own (types, bounds,
unknown fields).  Here the service's limits, which its settings set (:class:`Limits`), are
applied -- each kind by one helper, whatever the endpoint or the way the table came (JSON,
an uploaded CSV or Parquet file):

- rows of a table: :func:`check_rows` (BESTSCALE_MAX_ROWS)
- columns a table holds, used or not: :func:`check_table_columns`
  (BESTSCALE_MAX_TABLE_COLUMNS)
- length of a column name: :func:`check_column_names` (``intake.MAX_NAME_CHARS``)
- bytes an uploaded Parquet file decodes to: :func:`check_uncompressed`
  (BESTSCALE_MAX_UNCOMPRESSED_BYTES)
- columns a request uses: :func:`check_columns` (BESTSCALE_MAX_COLUMNS)
- candidates: :func:`check_candidates` (BESTSCALE_MAX_CANDIDATES)
- time limit: :func:`check_time_limit` (BESTSCALE_MAX_TIME_LIMIT_S)
- group values: ``selection.request.check_groups`` (it needs the prepared rows; the number
  comes from here, BESTSCALE_MAX_GROUPS)

and the request becomes the frozen options the floors below take:
:func:`selection_job` (``selection.request.SelectionJob``, holding the
``SearchOptions`` of :func:`search_options`), :func:`diagnostics_job` and
:func:`prediction_job`.  Defaults are not written here: an omitted field takes the
schema's default (constants of ``selection.search_setup``, ``core.conditions``,
``core.folds``) or, for the time limit and the candidate budget, the service's setting.
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Mapping
from dataclasses import dataclass
from typing import Any

from ..core import transforms as tr
from ..core.data import shown
from ..core.errors import InputError, Location, Option, PredictorChoice, Predictors, Table
from ..selection.deadline import Deadline
from ..selection.request import SelectionJob, Service, TableColumns, TrustOptions
from ..selection.search_setup import (
    PredictorChoices,
    SearchOptions,
    SentSpecification,
    TransformChoice,
)
from ..settings import get_settings
from ..version import __version__
from .errors import ProblemError
from .intake import MAX_NAME_CHARS, table_shape
from .pointers import RequestField
from .render.specs import specification_of, transform_of
from .schemas import (
    DiagnosticsRequest,
    PredictionRequest,
    SelectionRequest,
    SpecificationIn,
    TransformIn,
)
from .schemas import (
    TransformChoice as TransformSent,
)

#: where an uploaded file's problems point
UPLOADED_FILE = RequestField("/file")


@dataclass(frozen=True, slots=True)
class Limits:
    """The service's limits (its settings), read once per request."""

    rows: int
    columns: int  # columns a request may use
    table_columns: int  # columns a table may hold, used or not
    uncompressed_bytes: int  # an uploaded Parquet file, decoded
    candidates: int
    default_candidates: int
    time_limit_s: float
    default_time_limit_s: float
    groups: int


def service_limits() -> Limits:
    """The limits from the service settings (the one place outside settings.py that reads
    them; tests/test_architecture.py checks it)."""
    s = get_settings()
    return Limits(
        rows=s.max_rows,
        columns=s.max_columns,
        table_columns=s.max_table_columns,
        uncompressed_bytes=s.max_uncompressed_bytes,
        candidates=s.max_candidates,
        default_candidates=s.default_max_candidates,
        time_limit_s=s.max_time_limit_s,
        default_time_limit_s=s.default_time_limit_s,
        groups=s.max_groups,
    )


def service() -> Service:
    """What this service adds to every selection (version, signing keys, group processes)."""
    s = get_settings()
    return Service(__version__, s.model_keys(), s.group_processes, s.blas_threads)


# ---------------------------------------------------------------- one helper per limit


def check_rows(rows: int, where: Location, subject: str = "the table") -> None:
    """Refuse a table with more rows than the service accepts (JSON tables and uploaded CSV
    and Parquet files alike; ``subject`` names the table in the message)."""
    limit = service_limits().rows
    if rows > limit:
        raise InputError.at(
            where,
            f"{subject} has {rows} rows; this service accepts at most {limit} "
            "(setting BESTSCALE_MAX_ROWS)",
        )


def check_table_columns(
    n: int,
    where: Location,
    subject: str = "the table",
    *,
    at_least: bool = False,
    uploaded: bool = False,
) -> None:
    """Refuse a table holding more columns (used or not) than the service accepts.
    ``at_least``: ``n`` is where counting stopped (records); ``uploaded``: a file, whose
    columns the caller cannot pick from the request."""
    limit = service_limits().table_columns
    if n > limit:
        more = "more than " if at_least else ""
        advice = "" if uploaded else ", used or not"
        fix = "" if uploaded else "; send only the columns the request uses"
        raise InputError.at(
            where,
            f"{subject} has {more}{n} columns; this service accepts at most "
            f"{limit} in a table{advice} (setting BESTSCALE_MAX_TABLE_COLUMNS){fix}",
        )


def check_column_names(names: Iterable[str], where: Location) -> None:
    """Refuse an overlong column name (quoted cut short)."""
    for name in names:
        if len(name) > MAX_NAME_CHARS:
            raise InputError.at(
                where,
                f"column name {shown(name)} has {len(name)} characters; at most "
                f"{MAX_NAME_CHARS} are accepted",
            )


def check_uncompressed(size: int) -> None:
    """Refuse an uploaded Parquet file that decodes to more bytes than the service accepts
    (413: the request is too large, not wrong)."""
    limit = service_limits().uncompressed_bytes
    if size > limit:
        detail = (
            f"the Parquet file decompresses to {size} bytes; the limit is "
            f"{limit} (setting BESTSCALE_MAX_UNCOMPRESSED_BYTES)"
        )
        raise ProblemError(
            413,
            "too-large",
            "Uploaded table too large",
            detail,
            [{"pointer": UPLOADED_FILE.pointer, "detail": detail}],
        )


def check_columns(n_columns: int) -> None:
    """Refuse a request that uses more columns (response and predictors) than accepted."""
    limit = service_limits().columns
    if n_columns > limit:
        raise InputError.at(
            Predictors(),
            f"{n_columns} columns requested; at most "
            f"{limit} are accepted (setting BESTSCALE_MAX_COLUMNS)",
        )


def check_candidates(asked: int | None) -> int:
    """``limits.max_candidates``, the service's default when omitted, checked."""
    lim = service_limits()
    n = asked or lim.default_candidates
    if n > lim.candidates:
        raise InputError.at(
            Option("limits.max_candidates"),
            f"max_candidates {n} exceeds the service limit of {lim.candidates}",
        )
    return n


def check_time_limit(asked: float | None) -> float:
    """``limits.time_limit_s`` in seconds, the service's default when omitted, checked."""
    lim = service_limits()
    tl = asked or lim.default_time_limit_s
    if tl > lim.time_limit_s:
        raise InputError.at(
            Option("limits.time_limit_s"),
            f"time_limit_s {tl:g} exceeds the service limit of {lim.time_limit_s:g} s",
        )
    return float(tl)


def check_table(data: Mapping[str, Any]) -> int:
    """The row, total-column and name-length limits of the contract's Data object, read
    from its shape before any cell is parsed; returns the row count."""
    rows, names = table_shape(data, service_limits().table_columns)
    layout = (
        "columns"
        if data.get("columns") is not None
        else "records"
        if data.get("records") is not None
        else "csv"
    )
    check_rows(rows, Table())
    check_table_columns(len(names), Table(layout), at_least=layout == "records")
    check_column_names(names, Table(layout))
    return rows


# ---------------------------------------------------------------- requests -> options


def time_limit(req: SelectionRequest) -> float:
    """The request's time limit in seconds (the service default when omitted), checked."""
    return check_time_limit(req.limits.time_limit_s)


def check_predictor_choices(req: SelectionRequest) -> None:
    """Per-column transforms may name only the request's predictors."""
    if isinstance(req.transforms.predictors, dict):
        for col in req.transforms.predictors:
            if col not in req.predictors:
                raise InputError.at(PredictorChoice(col), f"'{col}' is not one of the predictors")


# ---------------------------------------------------------------- sent transforms, typed


def transform_choice(item: TransformSent) -> TransformChoice:
    """One transform a request lists for the search: a name or a transform object."""
    if isinstance(item, TransformIn):
        return TransformChoice(transform_of(item.as_dict()), auto_shift=item.shift == "auto")
    if item == "power":
        return TransformChoice(tr.Transform("power"), ladder=True)
    return TransformChoice(tr.Transform(item))


def response_choices(items: list[TransformSent] | None) -> tuple[TransformChoice, ...] | None:
    """``transforms.response``, typed (None: the default list)."""
    return None if items is None else tuple(map(transform_choice, items))


def predictor_choices(
    items: list[TransformSent] | dict[str, list[TransformSent]] | None,
) -> PredictorChoices | None:
    """``transforms.predictors``, typed: one list for all, or a list per column."""
    if isinstance(items, dict):
        return {col: tuple(map(transform_choice, its)) for col, its in items.items()}
    return response_choices(items)


def sent_specification(s: SpecificationIn) -> SentSpecification:
    """A specification a request sends (an incumbent, one to diagnose), typed; the logs
    sent with ``"shift": "auto"`` are marked, and the request's own form is kept to be
    shown back."""
    return SentSpecification(
        specification_of(s.as_dict()),
        response_auto_shift=s.response.transform.shift == "auto",
        predictors_auto_shift=frozenset(
            i for i, p in enumerate(s.predictors) if p.transform.shift == "auto"
        ),
        as_sent=s,
    )


Stop = Callable[[], bool]


def search_options(
    req: SelectionRequest, *, stop: Stop | None = None, deadline: Deadline | None = None
) -> SearchOptions:
    """The request's search options (time limit, candidate budget and fold scheme checked);
    ``deadline`` (default: the time limit from now) is the request's one deadline, shared by
    the search, the entries, trust and every group."""
    return _search_options(req, time_limit(req), stop, deadline)


def _search_options(
    req: SelectionRequest, tl: float, stop: Stop | None, deadline: Deadline | None
) -> SearchOptions:
    max_candidates = check_candidates(req.limits.max_candidates)
    req.validation.check_scheme()
    return SearchOptions(
        response_transforms=response_choices(req.transforms.response),
        predictor_transforms=predictor_choices(req.transforms.predictors),
        folds=req.validation.folds,
        repeats=req.validation.repeats,
        seed=req.validation.seed,
        metric=req.validation.metric,
        scheme=req.validation.scheme,
        alpha=req.alpha,
        top=req.top,
        max_candidates=max_candidates,
        time_limit_s=tl,
        intercept=req.intercept,
        units=dict(req.units),
        strategy=req.strategy,
        incumbent=sent_specification(req.incumbent) if req.incumbent is not None else None,
        deadline=deadline if deadline is not None else Deadline.after(tl),
        stop=stop,
    )


def table_columns(req: SelectionRequest) -> TableColumns:
    return TableColumns(
        req.data.as_dict(),
        req.response,
        tuple(req.predictors),
        tuple(req.categorical),
        req.order,
        req.group_by,
    )


def selection_job(
    req: SelectionRequest, *, stop: Stop | None = None, deadline: Deadline | None = None
) -> SelectionJob:
    """One selection request as ``selection.request`` takes it, every limit the request
    shows checked: the time limit, the table (rows, columns, names), the columns used, the
    per-column transforms, the fold scheme and the candidate budget."""
    tl = time_limit(req)
    if deadline is None:
        deadline = Deadline.after(tl)  # the request's clock starts before its first check
    table = table_columns(req)
    check_table(table.data)
    check_columns(1 + len(table.predictors))
    check_predictor_choices(req)
    t = req.trust
    return SelectionJob(
        table,
        _search_options(req, tl, stop, deadline),
        TrustOptions(t.stability, t.optimism, t.resamples),
        service_limits().groups,
    )


@dataclass(frozen=True, slots=True)
class DiagnosticsJob:
    """One specification to diagnose (POST /v1/diagnostics)."""

    table: TableColumns
    specification: SentSpecification
    search: SearchOptions
    max_points: int


def diagnostics_job(req: DiagnosticsRequest) -> DiagnosticsJob:
    """The diagnostics request as options, with the limits every table endpoint applies
    (rows, columns of the table and names, columns used)."""
    sent = sent_specification(req.specification)
    spec = sent.spec
    predictors = tuple(p.column for p in spec.predictors)
    categorical = list(req.categorical) + [
        p.column for p in spec.predictors if p.transform.name == "categorical"
    ]
    req.validation.check_scheme()
    table = TableColumns(
        req.data.as_dict(),
        spec.response,
        predictors,
        tuple(sorted(set(categorical))),
        req.order,
    )
    check_table(table.data)
    check_columns(1 + len(predictors))
    opts = SearchOptions(
        folds=req.validation.folds,
        repeats=req.validation.repeats,
        seed=req.validation.seed,
        metric=req.validation.metric,
        scheme=req.validation.scheme,
        alpha=req.alpha,
        units=dict(req.units),
    )
    return DiagnosticsJob(table, sent, opts, req.max_points)


@dataclass(frozen=True, slots=True)
class PredictionJob:
    """Rows to predict from a model artifact (POST /v1/predictions)."""

    model: dict[str, Any]
    data: dict[str, Any]
    interval: float
    interval_method: str | None


def prediction_job(req: PredictionRequest) -> PredictionJob:
    """The prediction request as options, with the table limits every endpoint applies."""
    data = req.data.as_dict()
    check_table(data)
    return PredictionJob(req.model, data, req.interval, req.interval_method)
