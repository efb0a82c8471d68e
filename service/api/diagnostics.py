"""POST /v1/diagnostics: one specification's entry, conditions and plot data (JSON, SVG or PNG)."""

from __future__ import annotations

from fastapi import APIRouter, Request
from starlette.responses import Response

from ..report.figures import render_figure
from ..selection.diagnose import diagnose_specification
from ..version import __version__
from .encode import JSONBody
from .middleware import note_result
from .negotiation import preferred
from .options import diagnostics_job
from .pool import compute_slot
from .routing import StrictRoute
from .schemas import DiagnosticsRequest

router = APIRouter(route_class=StrictRoute)

IMAGE_TYPES = {"image/svg+xml": "svg", "image/png": "png"}


def _wanted_image(request: Request) -> str | None:
    """ "svg" or "png" when the Accept header prefers that image to JSON (the first listed
    wins on equal q), else None."""
    kind = preferred(
        request.headers.get("accept", ""),
        ("application/json", *IMAGE_TYPES),
        tie_to_default=False,
    )
    return IMAGE_TYPES.get(kind)


@router.post(
    "/v1/diagnostics",
    tags=["diagnostics"],
    summary="Conditions, diagnostics and plot data for one specification",
    responses={200: {"content": {"application/json": {}, "image/svg+xml": {}, "image/png": {}}}},
)
def post_diagnostics(req: DiagnosticsRequest, request: Request):
    job = diagnostics_job(req)
    with compute_slot():
        prep = job.table.prepare()
        entry, plots = diagnose_specification(
            prep, job.specification, job.search, __version__, job.max_points
        )
        note_result({"data": prep.data_summary()})
        fmt = _wanted_image(request)
        if fmt is not None:
            image = render_figure(plots, fmt, title=entry["equation"])
            media = "image/svg+xml" if fmt == "svg" else "image/png"
            return Response(image, media_type=media)
    return JSONBody(
        {"service_version": __version__, "data": prep.data_summary(), **entry, "plots": plots}
    )
