"""JSON encoding that refuses non-finite numbers.

Every key is kept as it is: keys are contract names or the caller's own names (columns,
levels, units), and a column may well be called ``_id``."""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import orjson
from starlette.responses import Response

from ..core.errors import InputError
from ..settings import get_settings
from .pointers import RequestField
from .render import contract, renders


def to_jsonable(obj):
    """Plain Python containers, typed results in their contract form (:mod:`.render`);
    raises ValueError on NaN/Infinity (a bug, never shipped)."""
    kind = type(obj)
    if kind is str or kind is int or kind is bool or obj is None:  # leaves: nothing to render
        return obj
    if kind is float:
        if not math.isfinite(obj):
            raise ValueError("non-finite number in a response body")
        return obj
    if kind is dict:  # plain containers first: no typed result is one
        return {str(k): to_jsonable(v) for k, v in obj.items()}
    if kind is list:
        plain = _plain_numbers(obj)
        return plain if plain is not None else [to_jsonable(v) for v in obj]
    if renders(obj):
        return to_jsonable(contract(obj))
    if isinstance(obj, dict):
        return {str(k): to_jsonable(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        plain = _plain_numbers(obj)
        return plain if plain is not None else [to_jsonable(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return to_jsonable(obj.tolist())
    if isinstance(obj, (bool, np.bool_)):
        return bool(obj)
    if isinstance(obj, (int, np.integer)):
        return int(obj)
    if isinstance(obj, (float, np.floating)):
        f = float(obj)
        if not math.isfinite(f):
            raise ValueError("non-finite number in a response body")
        return f
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        raise TypeError(f"{type(obj).__name__} has no contract form in service.api.render")
    return obj


def _plain_numbers(seq: list | tuple) -> list | None:
    """A copy of ``seq`` when every item is a Python float (all finite, else ValueError) or
    every item is a Python int, which need no conversion; None otherwise.  Number lists
    (residuals, plot points) are most of a large body: one pass each instead of a call per
    item."""
    kinds = set(map(type, seq))  # one C-level pass instead of a generator per item
    if kinds <= {float}:
        if not all(map(math.isfinite, seq)):
            raise ValueError("non-finite number in a response body")
        return list(seq)
    if kinds == {int}:
        return list(seq)
    return None


class JSONBody(Response):
    media_type = "application/json"

    def render(self, content) -> bytes:
        out = orjson.dumps(to_jsonable(content))
        limit = get_settings().max_response_bytes
        if len(out) > limit:
            raise InputError.at(
                RequestField(""),  # the answer as a whole
                f"the answer would be {len(out)} bytes, over the limit of {limit} "
                "(setting BESTSCALE_MAX_RESPONSE_BYTES); ask for fewer ranking entries "
                "('top'), fewer rows to predict or fewer plot points",
            )
        return out
