"""HTTP routes: validate, convert to core types, call the core, serialise."""

from __future__ import annotations

from fastapi import APIRouter, Request
from starlette.responses import PlainTextResponse

from ..core import transforms as tr
from ..selection.request import run_selection
from ..version import __version__
from .encode import JSONBody
from .errors import with_group_problems
from .metrics import exposition
from .middleware import note_result
from .options import selection_job, service
from .pool import compute_slot
from .render.transforms import catalogue
from .reports import report_response, wants_html
from .routing import StrictRoute
from .schemas import SelectionRequest
from .selection import disconnect_probe

router = APIRouter(route_class=StrictRoute)


@router.post(
    "/v1/selections",
    response_class=JSONBody,
    tags=["selection"],
    summary="Search transformations, score every candidate, return a ranking",
    responses={200: {"content": {"application/json": {}, "text/html": {}}}},
)
def post_selections(req: SelectionRequest, request: Request):
    if wants_html(request.headers.get("accept", "")):
        return report_response(req, request)  # the page of POST /v1/reports
    with compute_slot():
        job = selection_job(req, stop=disconnect_probe(request))
        body = with_group_problems(run_selection(job, service()))
    note_result(body)
    return JSONBody(body)


@router.get(
    "/v1/transforms", response_class=JSONBody, tags=["reference"], summary="The transform catalogue"
)
def get_transforms():
    return JSONBody({"transforms": catalogue(), "ladder": list(tr.LADDER)})


@router.get("/healthz", response_class=JSONBody, tags=["operations"], summary="Liveness")
async def healthz():
    return JSONBody({"status": "ok", "service_version": __version__})


@router.get(
    "/metrics",
    tags=["operations"],
    summary="Prometheus metrics (text format)",
    response_class=PlainTextResponse,
)
def metrics():
    text, media_type = exposition()
    return PlainTextResponse(text, media_type=media_type)
