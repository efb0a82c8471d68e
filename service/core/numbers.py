"""How numbers are written for people: equations, coefficient tables, sentences, reports.

One rule everywhere (JSON keeps full numbers):

* ``sig`` significant digits (4 by default), trailing zeros kept (``0.7450`` next to
  ``0.7244``), so figures in one output line up;
* plain notation from 1e-4 up to 1e15, no thousands separators anywhere (``-15930``, never
  ``-1.593e+04``); outside that range ``1.593e-05`` is written ``1.593e-5`` (``1e-12``, not ``1.000e-12``);
* a whole number is written whole (``300``, not ``300.0``);
* a value that rounds to zero at that precision, and an exact zero, is ``0``;
* p-values below 1e-4 read ``< 0.0001``;
* rows are numbered from 1 (:data:`ROW_RULE`): row 1 is the first data row of the request,
  in every JSON field, message, figure and report that names a row (:func:`row_number`).

Parameters of a transform (a lambda, an exponent, a shift) are written with the same digits
but without trailing zeros (``exponent=0.5``): they are exact values, not estimates of a
table's precision.
"""

from __future__ import annotations

import math
from collections.abc import Iterable

P_FLOOR = 1e-4
#: how rows are counted, stated once wherever rows are named
ROW_RULE = (
    "rows are numbered from 1: row 1 is the first data row of the request (a CSV header line "
    "is not a row; JSON Pointers keep their 0-based array positions)"
)
_PLAIN_LOW = 1e-4
_PLAIN_HIGH = 1e15


def fmt(v: float | None, sig: int = 4, trailing_zeros: bool = True) -> str:
    """``v`` with ``sig`` significant digits (see the module rule); ``undefined`` if not finite."""
    if v is None or not math.isfinite(v):
        return "undefined"
    if v == 0:
        return "0"
    whole = v == math.floor(v)
    v = float(f"{v:.{sig - 1}e}")  # rounded first, so 0.99999 counts as 1
    a = abs(v)
    if a < _PLAIN_HIGH and whole:
        digits = sig - 1 - math.floor(math.log10(a))
        return str(int(v)) if digits >= 0 else str(int(round(v, digits)))
    if _PLAIN_LOW <= a < _PLAIN_HIGH:
        digits = sig - 1 - math.floor(math.log10(a))
        r = round(v, digits)
        if r == 0:
            return "0"
        if digits > 0:
            s = f"{r:.{digits}f}"
            if not trailing_zeros:
                s = s.rstrip("0").rstrip(".")
        else:
            s = str(int(r))
        return "0" if s in ("-0", "", "0") or float(s) == 0 else s
    mant, exp = f"{v:.{sig - 1}e}".split("e")
    if "." in mant:
        mant = mant.rstrip("0").rstrip(".")
    return f"{mant}e{int(exp)}"


def fmt_param(v: float) -> str:
    """A transform parameter: the same digits as :func:`fmt`, trailing zeros dropped."""
    return fmt(v, trailing_zeros=False)


def fmt_p(p: float | None) -> str:
    """A p-value for people: ``< 0.0001`` below 1e-4, else 2 significant digits."""
    if p is None or not math.isfinite(p):
        return "undefined"
    if p < P_FLOOR:
        return "< 0.0001"
    return fmt(p, sig=2)


def p_is(p: float) -> str:
    """``p = 0.032`` or ``p < 0.0001``, for sentences."""
    text = fmt_p(p)
    return f"p {text}" if text.startswith("<") else f"p = {text}"


def count_of(n: int, noun: str, plural: str | None = None) -> str:
    """``1 candidate`` / ``3 candidates``: a count with its noun in the right number."""
    return f"{n} {noun if n == 1 else (plural or noun + 's')}"


def row_number(index: int) -> int:
    """The number people see for the row at 0-based position ``index`` of the request's data."""
    return int(index) + 1


def rows_named(indexes: Iterable[int], listed: int | None = None) -> str:
    """``row 4`` / ``rows 1, 4 and 9`` (numbered from 1) for 0-based positions, counting from 1
    stated once; at most ``listed`` are named, the rest counted."""
    numbers = [row_number(i) for i in indexes]
    shown = numbers if listed is None else numbers[:listed]
    text = ", ".join(str(n) for n in shown)
    if len(numbers) > len(shown):
        text += f" and {len(numbers) - len(shown)} more"
    elif len(shown) > 1:
        text = ", ".join(str(n) for n in shown[:-1]) + f" and {shown[-1]}"
    return f"{'row' if len(numbers) == 1 else 'rows'} {text} (counting from 1)"


def failure_text(reason: str, candidates: int, wordings: int) -> str:
    """``12 candidates: reason`` or ``30 candidates, for example: reason`` (one reason in
    ``wordings`` that differ only in their numbers)."""
    sep = ":" if wordings == 1 else ", for example:"
    return f"{count_of(candidates, 'candidate')}{sep} {reason}"
