"""Build the ASGI application."""

from __future__ import annotations

import logging
from contextlib import asynccontextmanager

from fastapi import FastAPI
from threadpoolctl import threadpool_limits

from .api import docs_page, errors, openapi, pool
from .api.diagnostics import router as diagnostics_router
from .api.metrics import mark_this_process_dead
from .api.middleware import GuardMiddleware, ProblemCORSMiddleware, ServiceMiddleware
from .api.predictions import router as predictions_router
from .api.reports import router as reports_router
from .api.routes import router
from .settings import get_settings
from .version import __version__


def limit_blas_threads(n: int) -> None:
    """Small dense problems run fastest single-threaded; request-level parallelism comes
    from the worker pool, so BLAS threads are pinned process-wide (setting blas_threads)."""
    threadpool_limits(limits=n)


def route_paths(routes) -> set[str]:
    """Every route template, including those of included routers (metric labels)."""
    out: set[str] = set()
    for r in routes:
        if getattr(r, "path", None):
            out.add(r.path)
        inner = getattr(getattr(r, "original_router", None), "routes", None) or getattr(
            r, "routes", None
        )
        if inner:
            out |= route_paths(inner)
    return out


@asynccontextmanager
async def _lifespan(app: FastAPI):
    yield
    mark_this_process_dead()  # this worker's live gauges stop counting in /metrics


def create_app() -> FastAPI:
    """The application as configured by the process's settings (read once, see settings.py)."""
    s = get_settings()
    limit_blas_threads(s.blas_threads)
    app = FastAPI(
        title="Bestscale",
        version=__version__,
        description=openapi.DESCRIPTION,
        openapi_tags=openapi.TAGS,
        lifespan=_lifespan,
        docs_url=None,  # our own page, served offline (docs_page.py)
        redoc_url=None,
    )
    errors.install(app)
    app.include_router(router)
    app.include_router(predictions_router)
    app.include_router(diagnostics_router)
    app.include_router(reports_router)
    # middleware: the last added is the outermost
    app.add_middleware(
        GuardMiddleware,
        max_body_bytes=s.max_body_bytes,
        api_token=s.token(),
        body_timeout_s=s.body_timeout_s,
        metrics_public=s.metrics_public,
        docs_public=s.docs_public,
    )
    if s.cors_origins:
        app.add_middleware(
            ProblemCORSMiddleware,
            allow_origins=s.cors_origins,
            allow_methods=["GET", "POST"],
            allow_credentials=False,
            allow_headers=["Authorization", "Content-Type", "Accept", "X-Request-ID"],
            expose_headers=["X-Request-ID", "Retry-After"],
            max_age=600,
        )
    app.add_middleware(ServiceMiddleware, route_paths=lambda: route_paths(app.routes))
    openapi.install(app, s)
    docs_page.install(app)
    if s.model_key is None:
        logging.getLogger("bestscale").warning(
            "BESTSCALE_MODEL_KEY is not set: model artifacts are issued unsigned (marked "
            "signature.algorithm 'none') and anyone can forge a model that /v1/predictions "
            "accepts; set a key of 32 or more random characters in production"
        )
    pool.capacity()  # publish the slot count before the first computation
    return app


logging.getLogger("bestscale").setLevel(get_settings().log_level.upper())
app = create_app()
