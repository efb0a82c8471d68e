"""How numbers are written for people: equations, coefficient tables, sentences, reports.

One rule everywhere (JSON keeps full numbers):

* ``sig`` significant digits (4 by default), trailing zeros kept (``0.7450`` next to
  ``0.7244``), so figures in one output line up;
* plain notation from 1e-4 up to 1e15, no thousands separators anywhere (``-15930``, never
  ``-1.593e+04``); outside that range ``1.593e-05`` is written ``1.593e-5`` (``1e-12``, not ``1.000e-12``);
* a whole number is written whole (``300``, not ``300.0``);
* a value that rounds to zero at that precision, and an exact zero, is ``0``;
* p-values below 1e-4 read ``< 0.0001``.

Parameters of a transform (a lambda, an exponent, a shift) are written with the same digits
but without trailing zeros (``exponent=0.5``): they are exact values, not estimates of a
table's precision.
"""

from __future__ import annotations

import math
from typing import Any

P_FLOOR = 1e-4
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


def failure_text(group: dict[str, Any]) -> str:
    """``12 candidates: reason`` or ``30 candidates, for example: reason``."""
    sep = ":" if group["wordings"] == 1 else ", for example:"
    return f"{count_of(group['candidates'], 'candidate')}{sep} {group['reason']}"
