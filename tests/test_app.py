"""Building the application (service/app.py).

References: threadpoolctl's own report of the BLAS thread limit; FastAPI's route table
(every route of every included router) for the metric labels.
"""

from __future__ import annotations

from fastapi import APIRouter, FastAPI
from service.app import create_app, limit_blas_threads, route_paths
from threadpoolctl import threadpool_info, threadpool_limits


def test_route_paths_reach_into_included_routers():
    inner = APIRouter()
    inner.add_api_route("/v1/things/{name}", lambda name: name, methods=["GET"])
    app = FastAPI()
    app.include_router(inner)
    app.add_api_route("/healthz", lambda: {}, methods=["GET"])
    paths = route_paths(app.routes)
    assert {"/v1/things/{name}", "/healthz", "/openapi.json"} <= paths


def test_the_service_app_has_every_documented_endpoint():
    paths = route_paths(create_app().routes)
    # the endpoints of the HTTP contract (CONTRACT.md) and the operational ones
    for p in (
        "/v1/selections",
        "/v1/predictions",
        "/v1/diagnostics",
        "/v1/reports",
        "/v1/transforms",
        "/healthz",
        "/metrics",
        "/docs",
        "/openapi.json",
    ):
        assert p in paths, p


def test_blas_threads_are_limited_process_wide():
    with threadpool_limits(limits=None):  # restore whatever was set before
        limit_blas_threads(1)
        blas = [p for p in threadpool_info() if p.get("user_api") == "blas"]
        # source: threadpoolctl's report of each loaded BLAS library
        assert all(p["num_threads"] == 1 for p in blas)
