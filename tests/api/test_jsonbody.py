"""The duplicate-aware JSON parse against the standard library's view of every key.

Reference: ``json.loads`` with ``object_pairs_hook`` sees every (key, value) pair of every
object as written (source: Python documentation, json module), so it says exactly whether
some object repeats a key; the fast path must agree on every body, whatever its spacing.
"""

from __future__ import annotations

import json

import orjson
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from service.api import jsonbody
from service.api.errors import ProblemError

_keys = st.text(alphabet='ab":\\ {}', min_size=0, max_size=3)
_scalars = st.none() | st.booleans() | st.integers(-10, 10) | st.floats(-1e6, 1e6) | _keys
_values = st.recursive(
    _scalars,
    lambda inner: st.lists(inner, max_size=4) | st.lists(st.tuples(_keys, inner), max_size=4),
    max_leaves=20,
)


def _render(node, space: str) -> str:
    """JSON text; a list of (key, value) tuples is an object written with its keys as given
    (so keys may repeat)."""
    if isinstance(node, list) and node and all(isinstance(x, tuple) for x in node):
        inner = ("," + space).join(
            f"{json.dumps(k)}{space}:{space}{_render(v, space)}" for k, v in node
        )
        return "{" + space + inner + space + "}"
    if isinstance(node, list):
        return "[" + ",".join(_render(x, space) for x in node) + "]"
    if isinstance(node, tuple):
        return _render([node], space)
    return json.dumps(node)


def _reference_has_duplicate(text: str) -> bool:
    found = []

    def hook(pairs):
        keys = [k for k, _ in pairs]
        if len(set(keys)) != len(keys):
            found.append(True)
        return dict(pairs)

    json.loads(text, object_pairs_hook=hook)
    return bool(found)


@settings(max_examples=300, deadline=None)
@given(_values, st.sampled_from(["", " ", "\n  ", "\t"]))
def test_duplicates_found_exactly_as_the_standard_library_sees_them(node, space):
    text = '{"v":' + space + _render(node, space) + "}"
    body = text.encode()
    value = orjson.loads(body)
    assert (jsonbody.duplicate_key(body, value) is not None) == _reference_has_duplicate(text)


def test_pointer_names_the_object_and_the_key():
    body = b'{"data": {"records": [{"a": 1}, {"a/b": 2, "a/b": 3}]}}'
    with pytest.raises(ProblemError) as info:
        jsonbody.parse(body)
    # source: RFC 6901 section 3 ('/' in a key is written '~1')
    assert info.value.errors[0]["pointer"] == "/data/records/1/a~1b"
    assert info.value.status == 422


def test_a_body_without_duplicates_parses_to_the_same_value_as_orjson():
    body = json.dumps(
        {
            "columns": {"x": list(range(1000)), "y": ['a":b'] * 3},
            "k": [{"p": 1}, {"q": [1, {"r": None}]}],
        },
        indent=1,
    ).encode()
    assert jsonbody.parse(body) == orjson.loads(body)


def test_non_finite_tokens_stay_refused():
    # source: RFC 8259 section 6 (NaN and Infinity are not permitted)
    for text in (b'{"a": NaN}', b'{"a": Infinity}', b'{"a": -Infinity}'):
        with pytest.raises(orjson.JSONDecodeError):
            jsonbody.parse(text)
