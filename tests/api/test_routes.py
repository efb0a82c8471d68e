"""The selection, catalogue and operations routes (service/api/routes.py) over HTTP.

References: prometheus_client's text-format parser reads /metrics; the transform catalogue
is the one the core defines; RFC 9110 content negotiation (Accept: text/html gives the page).
"""

from __future__ import annotations

from fastapi.testclient import TestClient
from prometheus_client.parser import text_string_to_metric_families
from service.api.render.transforms import catalogue
from service.app import app
from service.core import transforms as tr
from service.version import __version__


def test_health_and_catalogue():
    with TestClient(app) as c:
        health = c.get("/healthz")
        assert health.json() == {"status": "ok", "service_version": __version__}
        cat = c.get("/v1/transforms").json()
    assert cat["transforms"] == catalogue() and cat["ladder"] == list(tr.LADDER)
    names = {t["name"] for t in cat["transforms"]}
    assert {"identity", "log", "sqrt", "box_cox", "yeo_johnson"} <= names


def test_metrics_are_prometheus_text():
    with TestClient(app) as c:
        c.get("/healthz")
        r = c.get("/metrics")
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/plain")
    # source: prometheus_client's own parser of the exposition format
    families = {f.name for f in text_string_to_metric_families(r.text)}
    assert any(name.startswith("bestscale_") for name in families)


def test_selections_answer_a_page_when_html_is_preferred():
    body = {
        "data": {
            "columns": {
                "y": [2.0, 4.1, 6.2, 7.9, 10.1, 12.2, 13.8, 16.1, 18.0, 20.2, 22.1, 23.9],
                "x": [1.0, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12],
            }
        },
        "response": "y",
        "predictors": ["x"],
        "transforms": {"response": ["identity"], "predictors": ["identity"]},
        "validation": {"folds": 3},
    }
    with TestClient(app) as c:
        page = c.post("/v1/selections", json=body, headers={"Accept": "text/html"})
        data = c.post("/v1/selections", json=body)
    assert page.headers["content-type"].startswith("text/html") and "<!DOCTYPE html>" in page.text
    assert data.headers["content-type"] == "application/json"
    assert data.json()["ranking"][0]["specification"]["response"]["column"] == "y"
