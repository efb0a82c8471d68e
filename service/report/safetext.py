"""Caller text made visible: bidirectional control characters shown as ``U+XXXX``.

A column name or level holding RIGHT-TO-LEFT OVERRIDE (U+202E) or an isolate would reorder
the text around it when a person reads the report or a figure, so a name could appear as
another.  Unicode's list of bidirectional formatting characters (UAX #9, section 2) is
replaced by its code point in text; the JSON responses keep the caller's strings unchanged.

Characters that XML 1.0 cannot hold at all (C0 controls other than tab, line feed and carriage
return, lone surrogates, U+FFFE and U+FFFF; section 2.2 of the XML specification) are shown the
same way, and so is DELETE (U+007F), which draws nothing: a name holding one still gives a
well-formed figure and page instead of a document a browser refuses to parse.
"""

from __future__ import annotations

import dataclasses
import re

BIDI_CONTROLS = "\u061c\u200e\u200f\u202a\u202b\u202c\u202d\u202e\u2066\u2067\u2068\u2069"
#: characters XML 1.0 cannot hold (XML 1.0 section 2.2, production [2] Char) plus DELETE
XML_INVALID = "\x00-\x08\x0b\x0c\x0e-\x1f\x7f\ud800-\udfff\ufffe\uffff"
_BIDI = re.compile(f"[{BIDI_CONTROLS}{XML_INVALID}]")


def visible(text: str) -> str:
    """``text`` with every bidirectional control character (and every character XML cannot
    hold) written as ``U+XXXX``."""
    if not _BIDI.search(text):
        return text
    return _BIDI.sub(lambda m: f"U+{ord(m.group()):04X}", text)


def _numbers(values: list | tuple) -> bool:
    """True for a series of numbers (or None), judged by its first item."""
    first = values[0]
    return not isinstance(first, (str, dict, list, tuple)) and not dataclasses.is_dataclass(first)


def visible_all(value):
    """The same for every string inside nested dicts, lists, tuples and frozen dataclasses
    (a dataclass comes back as a copy; numbers pass through)."""
    if isinstance(value, str):
        return visible(value)
    if isinstance(value, dict):
        return {k: visible_all(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        if value and _numbers(value):
            return value  # a number series
        items = [visible_all(v) for v in value]
        return items if isinstance(value, list) else tuple(items)
    if dataclasses.is_dataclass(value) and not isinstance(value, type):
        changes = {f.name: visible_all(getattr(value, f.name)) for f in dataclasses.fields(value)}
        return dataclasses.replace(value, **changes)
    return value
