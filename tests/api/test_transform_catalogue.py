"""GET /v1/transforms says what the request schema accepts, family by family.

The catalogue's names are the schema's transform names; each parameter's bounds are the
schema's; and what the catalogue says happens when a parameter is left out (required,
estimated, default) is what the service does, checked by requests in every place a transform
can be named: a specification's response and predictors, transforms.response and
transforms.predictors.
"""

from __future__ import annotations

import numpy as np
import pytest
from fastapi.testclient import TestClient
from service.app import app

PARAMS = ("shift", "exponent", "lambda", "reference")


@pytest.fixture(scope="module")
def client():
    with TestClient(app) as c:
        yield c


@pytest.fixture(scope="module")
def catalogue(client):
    r = client.get("/v1/transforms")
    assert r.status_code == 200
    return {t["name"]: t for t in r.json()["transforms"]}


@pytest.fixture(scope="module")
def schema(client):
    return client.get("/openapi.json").json()["components"]["schemas"]


def _columns(n: int = 60) -> dict:
    rng = np.random.default_rng(4)
    x = rng.uniform(1, 10, n)
    y = np.exp(0.5 + 0.4 * np.log(x) + rng.normal(0, 0.1, n))
    g = np.where(np.arange(n) % 2 == 0, "a", "b")
    return {"y": y.round(6).tolist(), "x": x.round(6).tolist(), "g": g.tolist()}


COLS = _columns()


def _column_for(name: str) -> str:
    return "g" if name == "categorical" else "x"


def _example(param: dict) -> object:
    return "b" if param["name"] == "reference" else param["example"]


def _post(client, place: str, transform: dict):
    """One request naming ``transform`` at ``place``; the status code."""
    col = _column_for(transform["name"])
    spec_pred = {"column": col, "transform": transform}
    if place == "response":
        diag = client.post(
            "/v1/diagnostics",
            json={
                "data": {"columns": COLS},
                "specification": {
                    "response": {"column": "y", "transform": transform},
                    "predictors": [{"column": "x"}],
                },
            },
        )
        search = client.post(
            "/v1/selections",
            json={
                "data": {"columns": COLS},
                "response": "y",
                "predictors": ["x"],
                "transforms": {"response": [transform], "predictors": ["identity"]},
                "validation": {"folds": 3},
            },
        )
        assert diag.status_code == search.status_code, (transform, diag.text, search.text)
        return diag
    if place == "predictor":
        return client.post(
            "/v1/diagnostics",
            json={
                "data": {"columns": COLS},
                "specification": {
                    "response": {"column": "y"},
                    "predictors": [spec_pred],
                },
            },
        )
    return client.post(
        "/v1/selections",
        json={
            "data": {"columns": COLS},
            "response": "y",
            "predictors": [col],
            "transforms": {"response": ["identity"], "predictors": [transform]},
            "validation": {"folds": 3},
        },
    )


def test_catalogue_names_are_the_schema_names(catalogue, schema):
    names = schema["TransformIn"]["properties"]["name"]
    enum = names.get("enum") or next(s["enum"] for s in names.get("anyOf", []) if "enum" in s)
    assert set(catalogue) == set(enum)


def _bounds(prop: dict) -> tuple[float | None, float | None, int | None]:
    lo = hi = length = None
    for s in prop.get("anyOf", [prop]):
        lo = s.get("minimum", lo)
        hi = s.get("maximum", hi)
        length = s.get("maxLength", length)
    return lo, hi, length


def test_parameter_bounds_are_the_schema_bounds(catalogue, schema):
    props = schema["TransformIn"]["properties"]
    for family in catalogue.values():
        for p in family["parameters"]:
            assert p["name"] in props, (family["name"], p["name"])
            lo, hi, length = _bounds(props[p["name"]])
            if "minimum" in p:
                assert (p["minimum"], p["maximum"]) == (lo, hi), (family["name"], p["name"])
            if "max_length" in p:
                assert p["max_length"] == length


PLACES = ("response", "predictor", "predictor_search")


def test_omitted_parameters_behave_as_the_catalogue_says(client, catalogue):
    checked = 0
    for family in catalogue.values():
        for place in PLACES:
            name = family["name"]
            if place == "response" and "response" not in family["applies_to"]:
                r = _post(client, place, {"name": name})
                assert r.status_code == 422, (name, place)
                continue
            bare = _post(client, place, {"name": name})
            required = [p for p in family["parameters"] if p["when_omitted"][place] == "required"]
            expected = 422 if required else 200
            assert bare.status_code == expected, (name, place, bare.text[:300])
            if required:
                assert required[0]["name"] in bare.json()["errors"][0]["detail"]
            for p in family["parameters"]:
                full = _post(client, place, {"name": name, p["name"]: _example(p)})
                assert full.status_code == 200, (name, place, p["name"], full.text[:300])
            checked += 1
    assert checked >= 2 * len(catalogue) - 1


def test_estimated_parameters_are_estimated(client, catalogue):
    body = _post(client, "response", {"name": "box_cox"}).json()
    assert body["specification"]["response"]["transform"].get("estimated") is True
    for family in catalogue.values():
        for p in family["parameters"]:
            if p["when_omitted"].get("predictor_search") == "estimated":
                sel = _post(client, "predictor_search", {"name": family["name"]}).json()
                assert sel["search"]["predictor_powers"]["x"], family["name"]


def test_parameters_of_other_families_are_refused(client, catalogue):
    for family in catalogue.values():
        own = {p["name"] for p in family["parameters"]}
        place = "response" if "response" in family["applies_to"] else "predictor"
        for other in PARAMS:
            if other in own:
                continue
            value = "b" if other == "reference" else 0.5
            needed = {
                p["name"]: _example(p)
                for p in family["parameters"]
                if p["when_omitted"][place] == "required"
            }
            r = _post(client, place, {"name": family["name"], **needed, other: value})
            assert r.status_code == 422, (family["name"], other)
            assert other in r.json()["errors"][0]["detail"]
