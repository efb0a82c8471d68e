"""The natural log, log(x + shift); the shift a column with zeros gets (common practice)."""

from __future__ import annotations

import numpy as np

from .._types import FloatArray
from ..numbers import fmt_param
from .bounds import SHIFT_BOUND
from .family import POSITIVE, Domain, Family, Parameter, Params, WhenOmitted

SHIFT_PARAMETER = Parameter(
    field="shift",
    kind='number or "auto"',
    bounds=(-SHIFT_BOUND, SHIFT_BOUND),
    unwritten=(None, 0.0),  # log(x + 0) is written as a plain log
    open_word="auto",
    when_omitted=WhenOmitted("default", "default", "default"),
    example=1.0,
    meaning='a constant added before the log (log(x + shift)), or "auto" to let the '
    "service choose half the smallest positive value when the column has zeros; without a "
    "shift (the default) a requested log is used as sent and needs values > 0; the default "
    "search adds a chosen shift on its own and labels it",
)


def chosen_shift(x: np.ndarray) -> float:
    """Shift for log(x + c) when x has zeros: half the smallest positive value (common practice)."""
    pos = x[x > 0]
    if pos.size == 0:
        return 1.0
    return float(0.5 * np.min(pos))


def needs_shift(x: np.ndarray) -> bool:
    return bool(np.min(x) <= 0)


class Log(Family):
    """``shift`` of ``None``: chosen from the data (0 unless the column has zeros)."""

    name = "log"
    cost = 1
    keeps_estimated = True
    parameters = (SHIFT_PARAMETER,)
    domain_statement = 'x + shift > 0 (without a shift: x > 0; "auto": x >= 0)'
    reading = (
        "log response: one unit of x multiplies the median response by exp(b), i.e. "
        "100(exp(b)-1)% ; log predictor: a 1% increase in x changes the model scale by "
        "b·ln(1.01); log-log: b is an elasticity"
    )

    def is_fitted(self, t: Params) -> bool:
        return t.shift is not None

    def simplicity(self, t: Params) -> int:
        return 4 if (t.shift or 0.0) != 0.0 else self.cost

    def label(self, t: Params, column: str) -> str:
        if t.shift:
            return f"log({column}, shift={fmt_param(t.shift)})"
        return f"log({column})"

    def domain(self, t: Params, as_sent: bool = False) -> Domain:
        """x + shift > 0.  Without a shift the search adds one for zeros (x >= 0), while a
        log applied as sent adds none (x > 0)."""
        if t.shift is None:
            return Domain(0.0, strict=as_sent)
        return Domain(-t.shift, strict=True)

    def complaint(self, t: Params, d: Domain, lo: float, column: str, role: str) -> str:
        if t.shift is None:
            return (
                f"{role} '{column}' {d.breach} (minimum {lo:.6g}); log needs {d.text} (zeros "
                "get a shift); use yeo_johnson or give log an explicit 'shift'"
            )
        return (
            f"{role} '{column}' plus shift {t.shift:.6g} is not positive everywhere (minimum "
            f"{lo:.6g}); log needs {POSITIVE.text}; use a larger shift or yeo_johnson"
        )

    def fixes(self, t: Params) -> str:
        return (
            "give log an explicit numeric 'shift' that makes every value positive, send "
            '"shift": "auto" to let the service choose one (half the smallest positive '
            "value), or use yeo_johnson"
        )

    def forward(self, t: Params, x: FloatArray) -> FloatArray:
        return np.log(x + (t.shift or 0.0))

    def inverse(self, t: Params, z: FloatArray) -> FloatArray:
        return np.exp(z) - (t.shift or 0.0)

    def inverse_singularities(self, t: Params) -> tuple[float, ...]:
        return ()

    def inverse_derivative(self, t: Params, z: FloatArray) -> FloatArray:
        return np.exp(z)

    def derivative(self, t: Params, y: FloatArray) -> FloatArray:
        return 1.0 / (y + (t.shift or 0.0))

    def log_jacobian(self, t: Params, y: FloatArray) -> float:
        return float(-np.sum(np.log(y + (t.shift or 0.0))))
