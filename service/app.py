"""Build the ASGI application."""

from __future__ import annotations

import logging

from fastapi import FastAPI

from . import errors
from .api.diagnostics import router as diagnostics_router
from .api.predictions import router as predictions_router
from .api.routes import router
from .middleware import ServiceMiddleware
from .settings import get_settings
from .version import __version__


def limit_blas_threads(n: int) -> None:
    """Small dense problems run fastest single-threaded; request-level parallelism comes
    from the worker pool, so BLAS threads are pinned process-wide (setting blas_threads)."""
    from threadpoolctl import threadpool_limits

    threadpool_limits(limits=n)


def create_app() -> FastAPI:
    limit_blas_threads(get_settings().blas_threads)
    app = FastAPI(
        title="Bestscale",
        version=__version__,
        description=("Chooses the scale (response and predictor transformations) on which to "
                     "model a linear regression, scoring every candidate by cross-validated error "
                     "on the original response scale."),
    )
    errors.install(app)
    app.include_router(router)
    app.include_router(predictions_router)
    app.include_router(diagnostics_router)
    s = get_settings()
    if s.cors_origins:
        from starlette.middleware.cors import CORSMiddleware

        app.add_middleware(CORSMiddleware, allow_origins=s.cors_origins, allow_methods=["GET", "POST"],
                           allow_headers=["Authorization", "Content-Type", "X-Request-ID"],
                           expose_headers=["X-Request-ID", "Retry-After"])
    app.add_middleware(ServiceMiddleware, max_body_bytes=s.max_body_bytes, api_token=s.api_token)
    return app


logging.getLogger("bestscale").setLevel(logging.INFO)
app = create_app()
