"""Strict, duplicate-aware parsing of JSON request bodies.

orjson is fast and refuses ``NaN``/``Infinity`` tokens and numbers that overflow a double,
but like most parsers it keeps the last of two equal keys in one object, silently.  A body
such as ``{"columns": {"x": [...], "x": [...]}}`` would then lose a column without a word,
so duplicates are found as follows, at a cost far below the parse itself:

1. ``raw`` counts the places in the body where a string ends and a colon follows
   (``"`` then optional JSON whitespace then ``:``).  Every object key ends that way, so
   ``raw`` >= the number of key tokens in the body.
2. ``kept`` counts the keys of every object in the parsed value.  Duplicates collapse, so
   the number of key tokens >= ``kept``, with equality exactly when no object repeats a key.
3. ``raw == kept`` therefore proves there is no duplicate.  Otherwise (a duplicate, or a
   string value containing ``":``) the body is parsed again with the standard library and
   a hook that sees every key of every object, which names the first duplicate by its JSON
   Pointer or clears the body.

Lists are walked only when they hold objects or lists (one C-level pass over the element
types), so a column of a million numbers costs a set of types, not a Python loop.
"""

from __future__ import annotations

import json
import re
from itertools import chain

import orjson

from .errors import ProblemError

_KEY_END_SPACED = re.compile(rb'"[ \t\r\n]+:')
_CONTAINERS = (dict, list)
MAX_DEPTH = 64  # nesting of objects and arrays; a request needs fewer than 10 levels


def too_deep() -> ProblemError:
    detail = (
        f"the JSON nests objects and arrays more than {MAX_DEPTH} levels deep; no request "
        "field needs more than a few levels"
    )
    return ProblemError(
        400,
        "malformed-body",
        "Malformed JSON body",
        detail,
        [{"pointer": "", "detail": detail}],
    )


def _key_ends(body: bytes) -> int:
    n = body.count(b'":')
    if any(q in body for q in (b'" ', b'"\n', b'"\t', b'"\r')):  # spaced keys are possible
        n += sum(1 for _ in _KEY_END_SPACED.finditer(body))
    return n


def _kept_keys(value) -> int:
    """Keys kept in every object of the parsed value; refuses nesting past MAX_DEPTH."""
    total = 0
    stack = [(value, 1)]
    while stack:
        v, depth = stack.pop()
        if depth > MAX_DEPTH:
            raise too_deep()
        if type(v) is dict:
            total += len(v)
            stack.extend((x, depth + 1) for x in v.values() if type(x) in _CONTAINERS)
        elif type(v) is list:
            kinds = set(map(type, v))
            if kinds == {dict}:  # records: count and look inside at C speed
                total += sum(map(len, v))
                inner = set(map(type, chain.from_iterable(map(dict.values, v))))
                if dict in inner or list in inner:
                    if depth + 2 > MAX_DEPTH:
                        raise too_deep()
                    stack.extend(
                        (x, depth + 2) for d in v for x in d.values() if type(x) in _CONTAINERS
                    )
            elif dict in kinds or list in kinds:
                stack.extend((x, depth + 1) for x in v if type(x) in _CONTAINERS)
    return total


class _Repeated(dict):
    """An object in which ``key`` appeared more than once."""

    key: str | None = None  # "" is a valid key


def _pairs(pairs):
    out = _Repeated()
    for k, v in pairs:
        if out.key is None and k in out:
            out.key = k
        out[k] = v
    if out.key is not None:
        return out
    return dict(out)


def _escape(token: str) -> str:
    return token.replace("~", "~0").replace("/", "~1")


def _find_repeated(value, path: str = "") -> tuple[str, str] | None:
    if isinstance(value, _Repeated) and value.key is not None:
        return path, value.key
    if isinstance(value, dict):
        for k, v in value.items():
            if isinstance(v, _CONTAINERS):
                hit = _find_repeated(v, f"{path}/{_escape(k)}")
                if hit:
                    return hit
    elif isinstance(value, list):
        for i, v in enumerate(value):
            if isinstance(v, _CONTAINERS):
                hit = _find_repeated(v, f"{path}/{i}")
                if hit:
                    return hit
    return None


def duplicate_key(body: bytes, value) -> tuple[str, str] | None:
    """(pointer of the object, repeated key) of the first object repeating a key, or None."""
    if _key_ends(body) == _kept_keys(value):
        return None
    try:
        exact = json.loads(body, object_pairs_hook=_pairs)  # orjson refused NaN/Infinity
        return _find_repeated(exact)
    except RecursionError:  # unreachable past the depth check above; kept as a guard
        raise too_deep() from None


def parse(body: bytes):
    """The parsed body; ``orjson.JSONDecodeError`` for malformed JSON (mapped to 400 by the
    error layer), a 422 problem naming the object when a key repeats."""
    value = orjson.loads(body)
    hit = duplicate_key(body, value)
    if hit is not None:
        where, key = hit
        ptr = f"{where}/{_escape(key)}"
        detail = (
            f"the key '{key}' appears more than once in the object at "
            f"'{where or '/'}'; each key may appear once"
        )
        raise ProblemError(
            422,
            "invalid-input",
            "Invalid request content",
            detail,
            [{"pointer": ptr, "detail": detail}],
        )
    return value
