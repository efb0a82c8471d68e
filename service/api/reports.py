"""POST /v1/reports: the selection of /v1/selections as one self-contained HTML page."""

from __future__ import annotations

from fastapi import APIRouter, Request
from starlette.responses import HTMLResponse

from ..report.html import CSP, render_report
from ..selection.plots import report_plots
from ..selection.request import work_selection
from .encode import to_jsonable
from .errors import ProblemError, with_group_problems
from .middleware import note_result
from .negotiation import preferred
from .options import Stop, selection_job, service
from .pool import compute_slot
from .routing import StrictRoute
from .schemas import SelectionRequest
from .selection import disconnect_probe

router = APIRouter(route_class=StrictRoute)

HTML_TYPE = "text/html"


def selection_report(req: SelectionRequest, stop: Stop | None = None) -> str:
    """Run the selection of ``req`` and return the report page (call inside a compute slot).

    The page is drawn from the JSON-ready body (typed results rendered, non-finite numbers
    refused, exactly as the JSON response), so every number on it is the response's.
    """
    job = selection_job(req, stop=stop)  # its one deadline: the selection and the figures
    worked = work_selection(job, service())
    result = with_group_problems(worked.body)
    if stop is not None and stop():
        # nobody will read the page: skip the figures and free the compute slot now
        raise ProblemError(
            400,
            "client-disconnected",
            "Client disconnected",
            "the client closed the connection before the report was ready",
        )
    body = to_jsonable(result)
    note_result(body)
    # the plot data from the rows the selection used and its listed entries' fits
    table, opts = job.table, job.search
    plots = report_plots(
        result, worked.prep, opts.alpha, opts.seed, deadline=opts.deadline, fits=worked.fits
    )
    context = {
        "response": table.response,
        "predictors": list(table.predictors),
        "alpha": opts.alpha,
        "order": table.order,
        "group_by": table.group_by,
    }
    return render_report(body, plots, context)


def report_response(req: SelectionRequest, request: Request | None = None) -> HTMLResponse:
    """The report as an HTTP response: text/html that forbids every fetch and script."""
    stop = disconnect_probe(request) if request is not None else None
    with compute_slot():
        page = selection_report(req, stop)
    return HTMLResponse(
        page, headers={"Content-Security-Policy": CSP, "X-Content-Type-Options": "nosniff"}
    )


def wants_html(accept: str) -> bool:
    """True when an Accept header prefers ``text/html`` to JSON (q-values honoured; a tie,
    ``*/*`` alone or no header keeps JSON, the default)."""
    return preferred(accept, ("application/json", HTML_TYPE), tie_to_default=True) == HTML_TYPE


@router.post(
    "/v1/reports",
    tags=["selection"],
    response_class=HTMLResponse,
    summary="The selection as one self-contained HTML page for people",
    description=(
        "Takes the body of POST /v1/selections and returns text/html: job "
        "summary, ranking, diagnostic figures, coefficients, interpretation, "
        "incumbent decision and cautions, with inline CSS and SVG, no "
        "scripts and no external resources. Errors are problem+json as on "
        "every endpoint."
    ),
    responses={200: {"content": {HTML_TYPE: {}}}},
)
def post_reports(req: SelectionRequest, request: Request):
    return report_response(req, request)
