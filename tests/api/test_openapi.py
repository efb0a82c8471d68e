"""The OpenAPI document (service/api/openapi.py).

References: every "$ref" resolves inside the document (JSON Pointer, RFC 6901); every example
the document carries validates against the schema beside it, checked by an independent JSON
Schema validator (jsonschema_rs, draft 2020-12, which OpenAPI 3.1 uses); operation ids are
unique (OpenAPI 3.1 section 4.8.10.1).
"""

from __future__ import annotations

import copy

import jsonschema_rs
from fastapi.testclient import TestClient
from service.api.openapi import OPERATION_IDS, trim
from service.app import app


def _doc() -> dict:
    with TestClient(app) as c:
        return c.get("/openapi.json").json()


def _refs(node):
    if isinstance(node, dict):
        for k, v in node.items():
            if k == "$ref":
                yield v
            else:
                yield from _refs(v)
    elif isinstance(node, list):
        for v in node:
            yield from _refs(v)


def _resolve(doc: dict, ref: str):
    node = doc
    for part in ref.removeprefix("#/").split("/"):
        node = node[part.replace("~1", "/").replace("~0", "~")]
    return node


def test_every_reference_resolves_and_operation_ids_are_unique():
    doc = _doc()
    assert doc["openapi"].startswith("3.")
    for ref in set(_refs(doc)):
        _resolve(doc, ref)
    ids = [
        op["operationId"]
        for item in doc["paths"].values()
        for op in item.values()
        if isinstance(op, dict) and "operationId" in op
    ]
    assert len(ids) == len(set(ids)) and set(OPERATION_IDS.values()) <= set(ids)


def test_every_example_validates_against_its_schema():
    doc = _doc()
    checked = 0
    for item in doc["paths"].values():
        for op in item.values():
            if not isinstance(op, dict):
                continue
            media = [*((op.get("requestBody") or {}).get("content") or {}).values()]
            media += [
                m
                for r in op.get("responses", {}).values()
                for m in (r.get("content") or {}).values()
            ]
            for m in media:
                if "example" not in m or "schema" not in m:
                    continue
                schema = {**m["schema"], "components": doc["components"]}
                validator = jsonschema_rs.Draft202012Validator(schema)
                errors = [e.message for e in validator.iter_errors(m["example"])]
                assert not errors, errors[:3]
                checked += 1
    assert checked >= 4  # request and response examples of the selection route at least


def test_trim_shortens_tables_and_lists_but_keeps_models_whole():
    value = {
        "data": {"columns": {"y": list(range(100))}, "records": [{"a": i} for i in range(100)]},
        "csv": "h\n" + "\n".join(map(str, range(100))),
        "ranking": [{"model": {"residuals": list(range(50))}} for _ in range(10)],
    }
    before = copy.deepcopy(value)
    out = trim(value, rows=5, items=2)
    assert out["data"]["columns"]["y"] == [0, 1, 2, 3, 4]
    assert len(out["data"]["records"]) == 5 and len(out["ranking"]) == 2
    assert out["ranking"][0]["model"]["residuals"] == list(range(50))
    assert value == before  # a copy: the input is unchanged
