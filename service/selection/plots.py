"""Plot data of the specifications a report shows in detail.

Built with the same functions as ``/v1/diagnostics`` (:func:`.entries.fitted_model`,
:func:`service.core.condition_rules.condition_inputs`, :func:`service.core.plots.diagnostic_plots`),
so a figure in the report is the figure that endpoint draws for the same specification.
"""

from __future__ import annotations

from collections.abc import Sequence

from ..core.condition_rules import condition_inputs
from ..core.data import Prepared, split_groups
from ..core.errors import CandidateFailure
from ..core.fitting import OLSFit
from ..core.plots import DiagnosticPlots, diagnostic_plots
from ..core.spec import Design, Specification
from .deadline import Deadline
from .entries import Entry, EntryReport, fitted_model
from .groups import GroupedReport
from .search import SelectionReport

#: ranked specifications shown in detail (figures, coefficients, interpretation)
DETAIL_TOP = 3
#: with group_by: groups whose rank-1 specification is shown in detail
GROUP_DETAIL_LIMIT = 10
#: points per diagnostic panel (the /v1/diagnostics default)
PLOT_MAX_POINTS = 2000


#: plot data (or the reason there is none) keyed by ``(group, rank)``
ReportPlots = dict[tuple[str | None, int], "DiagnosticPlots | str"]


def report_plots(
    body: SelectionReport | GroupedReport,
    prep: Prepared,
    alpha: float,
    seed: int,
    max_points: int = PLOT_MAX_POINTS,
    deadline: Deadline | None = None,
    fits: Sequence[Entry] = (),
) -> ReportPlots:
    """Plot data of the specifications shown in detail, keyed by ``(group, rank)``.

    ``body`` is a selection body as :func:`.request.run_selection` returns it (a group
    that could not be modelled has no ranking); ``prep`` the :class:`~service.core.data.Prepared` rows it was computed
    from.  Without groups the first :data:`DETAIL_TOP` ranks are
    drawn (group ``None``); with groups, rank 1 of the first :data:`GROUP_DETAIL_LIMIT`
    groups that have a ranking.  A value is the :class:`DiagnosticPlots` or, when the
    specification cannot be refitted, the reason as a string.  Past the request's
    ``deadline`` only the first specification is drawn; the others carry the reason.
    ``fits`` (a selection without groups: the listed entries' all-rows fits, rank 1 first)
    are drawn as they are; an entry without one is fitted again.
    """
    out: ReportPlots = {}
    if isinstance(body, GroupedReport):
        parts = split_groups(prep)
        shown = 0
        for name, gbody in body.groups.items():
            if shown >= GROUP_DETAIL_LIMIT:
                break
            sub = parts.get(name)
            ranking = gbody.ranking if isinstance(gbody, SelectionReport) else ()
            if not ranking or sub is None or isinstance(sub, Exception):
                continue
            out[(name, 1)] = (
                _out_of_time(deadline)
                if shown and _passed(deadline)
                else _plots_for(ranking[0], sub, alpha, seed, max_points)
            )
            shown += 1
        return out
    for i, entry in enumerate(body.ranking[:DETAIL_TOP]):
        assert entry.rank is not None  # a listed entry
        out[(None, entry.rank)] = (
            _out_of_time(deadline)
            if i and _passed(deadline)
            else _plots_for(
                entry, prep, alpha, seed, max_points, fits[i] if i < len(fits) else None
            )
        )
    return out


def _passed(deadline: Deadline | None) -> bool:
    return deadline is not None and deadline.passed()


def _out_of_time(deadline: Deadline | None) -> str:
    assert deadline is not None  # only called once it has passed
    return (
        f"the request's time limit of {deadline.limit_s:g} s ran out before this figure "
        "was drawn; raise limits.time_limit_s to see it"
    )


def specification_plots(
    spec: Specification, prep: Prepared, alpha: float, seed: int, max_points: int
) -> DiagnosticPlots:
    """Plot data of one specification fitted on all of ``prep``'s rows (what
    ``/v1/diagnostics`` returns); raises :class:`CandidateFailure` when it cannot be fitted."""
    _, design, fit, _ = fitted_model(spec, prep)
    return fit_plots(design, fit, prep, alpha, seed, max_points)


def fit_plots(
    design: Design, fit: OLSFit, prep: Prepared, alpha: float, seed: int, max_points: int
) -> DiagnosticPlots:
    """Plot data of an all-rows fit already made (an :class:`.entries.Entry`'s design and
    fit), so a caller that has the entry does not fit it again."""
    inp = condition_inputs(design, fit, prep, fit.fitted + fit.resid, alpha)
    return diagnostic_plots(inp, max_points=max_points, seed=seed)


def _plots_for(
    entry: EntryReport,
    prep: Prepared,
    alpha: float,
    seed: int,
    max_points: int,
    fitted: Entry | None = None,
) -> DiagnosticPlots | str:
    if fitted is not None and fitted.report.specification == entry.specification:
        return fit_plots(fitted.design, fitted.fit, prep, alpha, seed, max_points)
    try:
        return specification_plots(entry.specification, prep, alpha, seed, max_points)
    except CandidateFailure as exc:
        return f"the specification could not be refitted for plotting: {exc.reason}"
