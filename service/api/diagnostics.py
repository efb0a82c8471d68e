"""POST /v1/diagnostics: one specification's entry, conditions and plot data (JSON, SVG or PNG)."""

from __future__ import annotations

from fastapi import APIRouter, Request
from pydantic import Field
from starlette.responses import Response

from ..core.conditions import DEFAULT_ALPHA
from ..core.data import prepare
from ..selection.diagnose import diagnose_specification
from ..selection.search_setup import SearchOptions
from ..version import __version__
from .encode import JSONBody
from .intake import check_table
from .middleware import note_result
from .negotiation import preferred
from .pool import compute_slot
from .routing import StrictRoute
from .schemas import DataIn, SpecificationIn, ValidationIn, _Strict

router = APIRouter(route_class=StrictRoute)

IMAGE_TYPES = {"image/svg+xml": "svg", "image/png": "png"}


class DiagnosticsRequest(_Strict):
    data: DataIn
    specification: SpecificationIn
    alpha: float = Field(
        DEFAULT_ALPHA, gt=0, lt=0.5, description="significance level of condition tests"
    )
    order: str | None = Field(
        None, description="column giving observation order; enables independence tests"
    )
    categorical: list[str] = Field(
        default_factory=list, description="predictors to treat as categorical even if numeric"
    )
    validation: ValidationIn = Field(default_factory=ValidationIn)
    units: dict[str, str] = Field(default_factory=dict)
    max_points: int = Field(
        2000,
        ge=50,
        le=20000,
        description="points per plot (thinned for plotting only; tests use every row)",
    )


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
    spec = req.specification.as_dict()
    predictors = [p["column"] for p in spec["predictors"]]
    categorical = list(req.categorical) + [
        p["column"] for p in spec["predictors"] if p["transform"]["name"] == "categorical"
    ]
    req.validation.check_scheme()
    opts = SearchOptions(
        folds=req.validation.folds,
        repeats=req.validation.repeats,
        seed=req.validation.seed,
        metric=req.validation.metric,
        scheme=req.validation.scheme,
        alpha=req.alpha,
        units=dict(req.units),
    )
    check_table(req.data.as_dict())
    with compute_slot():
        prep = prepare(
            req.data.as_dict(),
            spec["response"]["column"],
            predictors,
            sorted(set(categorical)),
            req.order,
        )
        entry, plots = diagnose_specification(prep, spec, opts, __version__, req.max_points)
        note_result({"data": prep.data_summary()})
        fmt = _wanted_image(request)
        if fmt is not None:
            from ..report.figures import render_figure

            image = render_figure(plots, fmt, title=entry["equation"])
            media = "image/svg+xml" if fmt == "svg" else "image/png"
            return Response(image, media_type=media)
    return JSONBody(
        {"service_version": __version__, "data": prep.data_summary(), **entry, "plots": plots}
    )
