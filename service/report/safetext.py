"""Caller text made visible: bidirectional control characters shown as ``U+XXXX``.

A column name or level holding RIGHT-TO-LEFT OVERRIDE (U+202E) or an isolate would reorder
the text around it when a person reads the report or a figure, so a name could appear as
another.  Unicode's list of bidirectional formatting characters (UAX #9, section 2) is
replaced by its code point in text; the JSON responses keep the caller's strings unchanged.
"""

from __future__ import annotations

import re

BIDI_CONTROLS = "\u061c\u200e\u200f\u202a\u202b\u202c\u202d\u202e\u2066\u2067\u2068\u2069"
_BIDI = re.compile(f"[{BIDI_CONTROLS}]")


def visible(text: str) -> str:
    """``text`` with every bidirectional control character written as ``U+XXXX``."""
    if not _BIDI.search(text):
        return text
    return _BIDI.sub(lambda m: f"U+{ord(m.group()):04X}", text)


def visible_all(value):
    """The same for every string inside nested dicts and lists (numbers pass through)."""
    if isinstance(value, str):
        return visible(value)
    if isinstance(value, dict):
        return {k: visible_all(v) for k, v in value.items()}
    if isinstance(value, list):
        if value and not isinstance(value[0], (str, dict, list)):
            return value  # a number array
        return [visible_all(v) for v in value]
    if isinstance(value, tuple):
        return tuple(visible_all(v) for v in value)
    return value
