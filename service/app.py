"""Build the ASGI application."""

from __future__ import annotations

import logging

from fastapi import FastAPI

from . import errors
from .api.routes import router
from .version import __version__


def create_app() -> FastAPI:
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
