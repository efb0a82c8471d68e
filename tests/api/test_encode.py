"""Response encoding (service/api/encode.py): plain containers, private keys dropped,
non-finite numbers refused, and the response size cap.

Reference: RFC 8259 (JSON has no NaN or Infinity); orjson and the standard json module must
read back exactly what was encoded.
"""

from __future__ import annotations

import json
import math

import numpy as np
import orjson
import pytest
from service.api.encode import JSONBody, to_jsonable
from service.core.errors import InputError


def test_numpy_values_become_plain_json_and_private_keys_are_dropped():
    body = {
        "a": np.float64(0.1),
        "b": np.arange(3),
        "c": (np.int32(4), np.bool_(True)),
        "_design": object(),
        "nested": {"_fit": 1, "ok": [np.float32(0.5)]},
    }
    out = to_jsonable(body)
    assert out == {"a": 0.1, "b": [0, 1, 2], "c": [4, True], "nested": {"ok": [0.5]}}
    # source: the standard json module reads the orjson bytes back to the same values
    assert json.loads(orjson.dumps(out)) == out
    assert type(out["c"][1]) is bool and type(out["b"][0]) is int


@pytest.mark.parametrize("bad", [math.nan, math.inf, np.float64(-np.inf)])
def test_non_finite_numbers_are_refused(bad):
    # source: RFC 8259 section 6 (numeric values that cannot be represented, such as
    # Infinity and NaN, are not permitted)
    with pytest.raises(ValueError, match="non-finite"):
        to_jsonable({"x": [1.0, bad]})


def test_the_response_cap_is_a_problem_naming_the_setting(env):
    env(max_response_bytes=65536)
    small = JSONBody({"x": 1.5})
    assert json.loads(small.body) == {"x": 1.5}
    with pytest.raises(InputError) as exc:
        JSONBody({"x": list(range(20000))})
    assert "BESTSCALE_MAX_RESPONSE_BYTES" in exc.value.detail
