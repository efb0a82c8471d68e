"""Property-based fuzzing of every endpoint from the service's own OpenAPI document.

Schemathesis generates valid and invalid requests from the document and calls the app
in-process (ASGI).  Every response must be documented (status, media type, headers) and
match its schema, schema-violating requests must be refused, and no response may be a
5xx other than the documented back-pressure 503 (a problem body with Retry-After).
The service runs with a token (so unauthenticated calls must get 401) and short time limits
(so a fuzzed search cannot run for a minute).  Runtime is bounded by ``MAX_EXAMPLES`` per
endpoint and phase.
"""

from __future__ import annotations

import json
import os
import tempfile
from pathlib import Path

import pytest
import schemathesis
from hypothesis import HealthCheck, settings
from hypothesis.configuration import set_hypothesis_home_dir
from schemathesis import checks as st_checks

# keep hypothesis' example cache out of the repository
set_hypothesis_home_dir(os.path.join(tempfile.gettempdir(), "bestscale-hypothesis"))

MAX_EXAMPLES = 12  # per endpoint and generation phase
HEAVY_EXAMPLES = 5  # an endpoint that runs a search and draws figures for every answer
HEAVY = ["/v1/reports"]
# the coverage phase (every boundary of every field, hundreds of cases) runs everywhere but
# on the heavy endpoint, whose schema is the one of /v1/selections anyway
CONFIG = {
    "operations": [
        {"include-path": path, "phases": {"coverage": {"enabled": False}}} for path in HEAVY
    ]
}
TOKEN = "fuzz-token-0123456789abcdef"
AUTH = {"Authorization": f"Bearer {TOKEN}"}
EXAMPLES = Path(__file__).resolve().parents[2] / "openapi_examples"
ENV = {
    "BESTSCALE_API_TOKEN": TOKEN,
    "BESTSCALE_DEFAULT_TIME_LIMIT_S": "0.5",
    "BESTSCALE_MAX_TIME_LIMIT_S": "1",
    "BESTSCALE_DEFAULT_MAX_CANDIDATES": "8",
    "BESTSCALE_MAX_CANDIDATES": "16",
    "BESTSCALE_POOL_SIZE": "4",
    "BESTSCALE_DOCS_PUBLIC": "true",  # the fuzzer reads the schema without the token
}


def documented_backpressure_only(ctx, response, case):
    """A 5xx is a failure unless it is the documented 503: problem+json with Retry-After
    (busy, or a search budget that ran out before any candidate)."""
    if response.status_code < 500:
        return None
    ok = (
        response.status_code == 503
        and "retry-after" in {k.lower() for k in response.headers}
        and _header(response, "content-type").startswith("application/problem+json")
    )
    if not ok:
        raise AssertionError(f"server error {response.status_code}: {response.text[:500]}")
    body = json.loads(response.text)
    assert body["type"] in ("urn:bestscale:problem:busy", "urn:bestscale:problem:over-budget")
    return None


def finite_json(ctx, response, case):
    """JSON bodies never carry NaN or Infinity tokens (the contract: finite numbers or null)."""
    if "json" in response.headers.get("content-type", ""):

        def refuse(token):
            raise AssertionError(f"non-finite JSON token {token}")

        json.loads(response.text, parse_constant=refuse)


CHECKS = [
    documented_backpressure_only,
    finite_json,
    st_checks.status_code_conformance,
    st_checks.content_type_conformance,
    st_checks.response_schema_conformance,
    st_checks.response_headers_conformance,
    st_checks.negative_data_rejection,
    st_checks.ignored_auth,
    st_checks.missing_required_header,
]


@pytest.fixture(scope="module")
def fuzz_app():
    from service.settings import get_settings

    saved = {k: os.environ.get(k) for k in ENV}
    os.environ.update(ENV)
    get_settings.cache_clear()
    try:
        from service.app import create_app

        yield create_app()
    finally:
        for k, v in saved.items():
            if v is None:
                os.environ.pop(k, None)
            else:
                os.environ[k] = v
        get_settings.cache_clear()


@pytest.fixture(scope="module")
def fuzz_schema(fuzz_app):
    from schemathesis.config import SchemathesisConfig

    return schemathesis.openapi.from_asgi(
        "/openapi.json", fuzz_app, config=SchemathesisConfig.from_dict(CONFIG)
    )


schema = schemathesis.pytest.from_fixture("fuzz_schema")


def _header(response, name: str) -> str:
    """A header as text: schemathesis gives lists of values, other clients strings."""
    value = response.headers.get(name)
    if isinstance(value, (list, tuple)):
        value = value[0] if value else ""
    return value or ""


def _fuzz(case) -> None:
    response = case.call(headers=AUTH)
    case.validate_response(response, checks=CHECKS, headers=AUTH)


@schema.exclude(path=HEAVY).parametrize()
@settings(
    max_examples=MAX_EXAMPLES,
    deadline=None,
    database=None,
    derandomize=True,
    suppress_health_check=list(HealthCheck),
)
def test_endpoint_survives_fuzzing(case):
    _fuzz(case)


@schema.include(path=HEAVY).parametrize()
@settings(
    max_examples=HEAVY_EXAMPLES,
    deadline=None,
    database=None,
    derandomize=True,
    suppress_health_check=list(HealthCheck),
)
def test_search_endpoint_survives_fuzzing(case):
    _fuzz(case)


def _example_requests():
    return sorted(EXAMPLES.glob("*.request.json"))


@pytest.mark.parametrize("path", _example_requests(), ids=lambda p: p.name)
def test_example_request_answer_matches_the_schema(path, fuzz_schema):
    name = path.name.split(".")[0]
    operation = fuzz_schema[f"/v1/{name}"]["POST"]
    case = operation.Case(body=json.loads(path.read_text()), media_type="application/json")
    response = case.call(headers=AUTH)
    assert response.status_code == 200, response.text[:500]
    case.validate_response(
        response,
        checks=[
            st_checks.response_schema_conformance,
            st_checks.content_type_conformance,
            finite_json,
        ],
    )


def test_stored_example_responses_match_the_schema(fuzz_schema):
    """The stored answers (the document's response examples) fit the documented schemas."""
    import jsonschema_rs

    doc = fuzz_schema.raw_schema
    components = doc["components"]["schemas"]
    found = 0
    for path in sorted(EXAMPLES.glob("*.response.json")):
        name = path.name.split(".")[0]
        method = "get" if name == "transforms" else "post"
        ref = doc["paths"][f"/v1/{name}"][method]["responses"]["200"]["content"][
            "application/json"
        ]["schema"]["$ref"]
        schema_doc = {**components[ref.rsplit("/", 1)[1]], "components": {"schemas": components}}
        validator = jsonschema_rs.validator_for(schema_doc)
        errors = [e.message for e in validator.iter_errors(json.loads(path.read_text()))]
        assert not errors, (path.name, errors[:3])
        found += 1
    assert found >= 4


def test_openapi_describes_every_endpoint_with_examples(fuzz_app):
    doc = fuzz_app.openapi()
    wanted = {
        ("post", "/v1/selections"),
        ("post", "/v1/predictions"),
        ("post", "/v1/diagnostics"),
        ("get", "/v1/transforms"),
        ("get", "/healthz"),
        ("get", "/metrics"),
    }
    found = {(m, p) for p, item in doc["paths"].items() for m in item}
    assert wanted <= found
    for path, item in doc["paths"].items():
        for method, op in item.items():
            assert op.get("summary") or op.get("description"), (method, path)
            ok = op["responses"]["200"]
            assert ok["description"] and ok["content"], (method, path)
            for code, resp in op["responses"].items():
                if code != "200":  # every error is a problem document
                    assert "application/problem+json" in resp["content"], (method, path, code)
            if method == "post":
                body = op["requestBody"]["content"]["application/json"]
                assert body["examples"], (method, path)
                assert {"400", "413", "415", "422", "503"} <= set(op["responses"])
    for method, path in wanted - {("get", "/metrics")}:
        content = doc["paths"][path][method]["responses"]["200"]["content"]["application/json"]
        assert "$ref" in content["schema"]
        if path != "/healthz":
            assert "example" in content, path
