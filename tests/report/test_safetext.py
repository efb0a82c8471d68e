"""Caller text made visible (service/report/safetext.py).

Reference: Unicode UAX #9 section 2 lists the explicit bidirectional formatting characters
(LRE, RLE, PDF, LRO, RLO, LRI, RLI, FSI, PDI) and the marks (LRM, RLM, ALM); unicodedata
gives every one of them a bidirectional class among LRE/RLE/PDF/LRO/RLO/LRI/RLI/FSI/PDI/L/R/AL
with category Cf.
"""

from __future__ import annotations

import sys
import unicodedata
from dataclasses import dataclass

from service.report.safetext import BIDI_CONTROLS, visible, visible_all

# source: UAX #9 section 2 (explicit formatting characters and implicit marks)
UAX9 = {
    "\u202a": "LRE",
    "\u202b": "RLE",
    "\u202c": "PDF",
    "\u202d": "LRO",
    "\u202e": "RLO",
    "\u2066": "LRI",
    "\u2067": "RLI",
    "\u2068": "FSI",
    "\u2069": "PDI",
    "\u200e": "L",
    "\u200f": "R",
    "\u061c": "AL",
}


def test_the_list_is_uax9s_list():
    assert set(BIDI_CONTROLS) == set(UAX9)
    for ch, cls in UAX9.items():
        # source: Python's unicodedata (the Unicode Character Database)
        assert unicodedata.bidirectional(ch) == cls and unicodedata.category(ch) == "Cf"


def test_every_format_character_of_the_database_with_an_explicit_class_is_covered():
    explicit = {"LRE", "RLE", "PDF", "LRO", "RLO", "LRI", "RLI", "FSI", "PDI"}
    found = {
        chr(c) for c in range(sys.maxunicode + 1) if unicodedata.bidirectional(chr(c)) in explicit
    }
    assert found <= set(BIDI_CONTROLS)


def test_controls_are_written_as_code_points_and_other_text_is_kept():
    name = "cost\u202e_lanif"
    assert visible(name) == "costU+202E_lanif"
    assert visible("Größe (m²) ☃ عربى") == "Größe (m²) ☃ عربى"  # ordinary letters stay


def test_visible_all_walks_nested_values_and_keeps_numbers():
    value = {"a": ["x\u2066y", {"b": ("\u200f",)}], "n": [1.0, 2.0], "k": 3}
    assert visible_all(value) == {"a": ["xU+2066y", {"b": ("U+200F",)}], "n": [1.0, 2.0], "k": 3}


@dataclass(frozen=True)
class _Named:
    name: str
    values: tuple[float, ...]
    inner: tuple[_Named, ...] = ()


def test_visible_all_copies_frozen_dataclasses_with_their_strings_made_visible():
    value = _Named("a\u202eb", (1.0, 2.0), (_Named("\u2067", ()),))
    out = visible_all(value)
    assert out == _Named("aU+202Eb", (1.0, 2.0), (_Named("U+2067", ()),))
    assert value.name == "a\u202eb"  # the original is left as it was
    assert out.values is value.values  # a number series is passed through, not copied
