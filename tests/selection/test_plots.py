"""Plot data of the entries a report shows in detail (service/selection/plots.py).

References: statsmodels OLS residuals and fitted values of each shown specification (the
points a panel holds); the numbers of entries and groups shown in detail as the module
states them.
"""

from __future__ import annotations

import time
from types import SimpleNamespace

import numpy as np
import pytest
import statsmodels.api as sm
from service.core.data import prepare
from service.core.plots import DiagnosticPlots
from service.selection.deadline import Deadline
from service.selection.groups import GroupedReport
from service.selection.plots import DETAIL_TOP, report_plots
from service.selection.search import SelectionReport

from tests.typed import spec_of


def _spec(rt, pt):
    return {
        "response": {"column": "y", "transform": {"name": rt}},
        "predictors": [{"column": "x", "transform": {"name": pt}}],
    }


def _listed(rank: int, rt: str, pt: str) -> SimpleNamespace:
    """A ranking entry as report_plots reads it: its rank and specification."""
    return SimpleNamespace(rank=rank, specification=spec_of(_spec(rt, pt)))


def _body(entries) -> SelectionReport:
    """A selection body holding only what report_plots reads: its ranking."""
    return SelectionReport(None, None, tuple(entries), ())


def _grouped(groups) -> GroupedReport:
    return GroupedReport(None, None, groups, ())


@pytest.fixture(scope="module")
def case():
    """Invented: minutes a ferry needs to load, by vehicles waiting; one group per pier."""
    rng = np.random.default_rng(4)
    n = 72
    x = rng.uniform(5, 60, n)
    y = np.exp(0.5 + 0.7 * np.log(x) + rng.normal(0, 0.2, n))
    pier = np.repeat(["north", "south", "west"], n // 3)
    cols = {"y": y.tolist(), "x": x.tolist(), "pier": pier.tolist()}
    return cols, x, y, pier


def test_the_top_entries_get_the_residuals_of_their_own_fit(case):
    cols, x, y, _ = case
    prep = prepare({"columns": cols}, "y", ["x"])
    scales = [("log", "log"), ("identity", "identity"), ("sqrt", "log"), ("log", "identity")]
    body = _body([_listed(i + 1, *s) for i, s in enumerate(scales)])
    out = report_plots(body, prep, 0.05, seed=0)
    assert sorted(out) == [(None, r) for r in range(1, DETAIL_TOP + 1)]
    fwd = {"log": np.log, "identity": lambda v: v, "sqrt": np.sqrt}
    for (_, rank), plots in out.items():
        rt, pt = scales[rank - 1]
        # source: statsmodels OLS of the same specification
        ref = sm.OLS(fwd[rt](y), sm.add_constant(fwd[pt](x))).fit()
        pts = plots.residuals_fitted.points
        at = np.asarray(pts.row) - 1  # rows are counted from 1
        np.testing.assert_allclose(pts.x, ref.fittedvalues[at], rtol=1e-9)
        np.testing.assert_allclose(pts.y, ref.resid[at], rtol=1e-9)


def test_a_specification_that_cannot_be_refitted_gives_its_reason(case):
    cols, *_ = case
    cols = dict(cols, x=[-1.0, *cols["x"][1:]])  # log(x) no longer applies to row 0
    prep = prepare({"columns": cols}, "y", ["x"])
    out = report_plots(_body([_listed(1, "log", "log")]), prep, 0.05, 0)
    assert isinstance(out[(None, 1)], str) and "could not be refitted" in out[(None, 1)]


def test_groups_show_rank_one_of_each_group_with_a_ranking(case):
    cols, x, y, pier = case
    prep = prepare({"columns": cols}, "y", ["x"], group_by="pier")
    body = _grouped(
        {
            "north": _body([_listed(1, "log", "log")]),
            "south": _body([]),  # a group without a ranking is skipped
            "west": _body([_listed(1, "identity", "identity")]),
        }
    )
    out = report_plots(body, prep, 0.05, seed=1)
    assert sorted(out) == [("north", 1), ("west", 1)]
    west = pier == "west"
    # source: statsmodels OLS on the west pier's rows only
    ref = sm.OLS(y[west], sm.add_constant(x[west])).fit()
    pts = out[("west", 1)].residuals_fitted.points
    rows = np.flatnonzero(west)
    pos = np.searchsorted(rows, np.asarray(pts.row) - 1)  # rows are counted from 1
    np.testing.assert_allclose(pts.y, ref.resid[pos], rtol=1e-9)


def test_past_the_deadline_only_the_first_figure_is_drawn(case):
    """The request's one deadline also bounds the report's figures: once it has passed, the
    first specification (or group) is still drawn and the others say why they are not."""
    cols, *_ = case
    prep = prepare({"columns": cols}, "y", ["x"])
    scales = [("log", "log"), ("identity", "identity"), ("sqrt", "log")]
    body = _body([_listed(i + 1, *s) for i, s in enumerate(scales)])
    gone = Deadline(time.monotonic() - 1.0, 5.0)
    out = report_plots(body, prep, 0.05, seed=0, deadline=gone)
    assert isinstance(out[(None, 1)], DiagnosticPlots)
    for rank in (2, 3):
        assert "time limit of 5 s ran out" in out[(None, rank)]
    assert report_plots(body, prep, 0.05, seed=0, deadline=Deadline.after(60)) == report_plots(
        body, prep, 0.05, seed=0
    )
    grouped = prepare({"columns": cols}, "y", ["x"], group_by="pier")
    gbody = _grouped({p: _body([_listed(1, "log", "log")]) for p in ("north", "south", "west")})
    gout = report_plots(gbody, grouped, 0.05, seed=0, deadline=gone)
    assert isinstance(gout[("north", 1)], DiagnosticPlots)
    assert all(isinstance(gout[(p, 1)], str) for p in ("south", "west"))


def test_plot_data_from_the_listed_fits_equals_a_refit_and_needs_none(monkeypatch):
    from service.api.options import selection_job, service
    from service.api.schemas import SelectionRequest
    from service.demo import demo_request
    from service.selection import plots as plots_mod
    from service.selection.request import work_selection

    job = selection_job(SelectionRequest.model_validate(demo_request()))
    worked = work_selection(job, service())
    opts = job.search
    assert len(worked.fits) == len(worked.body.ranking)
    refitted = report_plots(worked.body, worked.prep, opts.alpha, opts.seed)

    def no_refit(*a, **k):
        raise AssertionError("plot data refitted a listed entry")

    monkeypatch.setattr(plots_mod, "fitted_model", no_refit)
    kept = report_plots(worked.body, worked.prep, opts.alpha, opts.seed, fits=worked.fits)
    assert kept.keys() == refitted.keys()
    for key, got in kept.items():
        # source: the same specification fitted again on all rows (specification_plots)
        assert got == refitted[key], key
