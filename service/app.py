"""Build the ASGI application."""

from __future__ import annotations

import logging

from fastapi import FastAPI

from . import errors
from .api.routes import router
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
    return app


logging.getLogger("bestscale").setLevel(logging.INFO)
app = create_app()
