"""The named rungs of the ladder of powers (Tukey 1977) and the general power x^q.

sqrt (q = 1/2), reciprocal (q = -1, written 1/x) and square (q = 2) are powers with a
name and ordinary notation; ``power`` carries any other exponent, fixed or estimated
(Box & Tidwell 1962 for predictors).  Inverses clip as Duan (1983) smearing practice does:
an increasing power whose argument falls below 0 maps to 0; a decreasing power of z <= 0
has no original value (``nan``).
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np

from .._types import FloatArray
from ..numbers import fmt_param
from .bounds import EXPONENT_BOUND, PARAM_FLOOR
from .family import (
    NON_NEGATIVE,
    POSITIVE,
    Domain,
    Family,
    Parameter,
    Params,
    Values,
    WhenOmitted,
    exponent_of,
)

EXPONENT_PARAMETER = Parameter(
    field="exponent",
    kind="number",
    bounds=(-EXPONENT_BOUND, EXPONENT_BOUND),
    unwritten=(),  # a power still to be estimated shows its open exponent
    when_omitted=WhenOmitted("required", "required", "estimated"),
    example=0.25,
    meaning=f"the exponent q in x^q, {PARAM_FLOOR:g} <= |q| <= {EXPONENT_BOUND:g} (use log for "
    "0); in transforms.predictors omit it (or send estimated: true) to estimate the "
    "predictor's power from the data (Box & Tidwell 1962)",
)


class Sqrt(Family):
    name = "sqrt"
    cost = 2
    domain_statement = "x >= 0"
    reading = (
        "no constant-rate reading; effects are reported as back-transformed predictions "
        "at two values of x"
    )

    def label(self, t: Params, column: str) -> str:
        return f"sqrt({column})"

    def domain(self, t: Params, as_sent: bool = False) -> Domain:
        return NON_NEGATIVE

    def forward(self, t: Params, x: FloatArray) -> FloatArray:
        return np.sqrt(x)

    def inverse(self, t: Params, z: FloatArray) -> FloatArray:
        zc = np.maximum(z, 0.0)
        return zc * zc

    def inverse_singularities(self, t: Params) -> tuple[float, ...]:
        return (0.0,)

    def inverse_derivative(self, t: Params, z: FloatArray) -> FloatArray:
        return 2.0 * np.maximum(z, 0.0)

    def derivative(self, t: Params, y: FloatArray) -> FloatArray:
        return 0.5 / np.sqrt(y)

    def log_jacobian(self, t: Params, y: FloatArray) -> float:
        return float(-y.size * math.log(2.0) - 0.5 * np.sum(np.log(y)))


class Reciprocal(Family):
    name = "reciprocal"
    cost = 2
    domain_statement = "x > 0"
    reading = "1/x reverses order: a positive slope on 1/y means y falls as x rises"

    def increasing(self, t: Params) -> bool:
        return False

    def label(self, t: Params, column: str) -> str:
        return f"1/{column}"

    def domain(self, t: Params, as_sent: bool = False) -> Domain:
        return POSITIVE

    def forward(self, t: Params, x: FloatArray) -> FloatArray:
        return 1.0 / x

    def inverse(self, t: Params, z: FloatArray) -> FloatArray:
        return np.where(z > 0, 1.0 / np.where(z > 0, z, 1.0), np.nan)

    def inverse_singularities(self, t: Params) -> tuple[float, ...]:
        return (0.0,)

    def inverse_derivative(self, t: Params, z: FloatArray) -> FloatArray:
        return np.where(z > 0, -1.0 / (z * z), np.nan)

    def derivative(self, t: Params, y: FloatArray) -> FloatArray:
        return -1.0 / (y * y)

    def log_jacobian(self, t: Params, y: FloatArray) -> float:
        return float(-2.0 * np.sum(np.log(y)))


class Square(Family):
    name = "square"
    cost = 2
    domain_statement = "x >= 0"
    reading = "no constant-rate reading; effects are reported at two values of x"

    def label(self, t: Params, column: str) -> str:
        return f"{column}^2"

    def domain(self, t: Params, as_sent: bool = False) -> Domain:
        return NON_NEGATIVE

    def forward(self, t: Params, x: FloatArray) -> FloatArray:
        return x * x

    def inverse(self, t: Params, z: FloatArray) -> FloatArray:
        return np.sqrt(np.maximum(z, 0.0))

    def inverse_singularities(self, t: Params) -> tuple[float, ...]:
        return (0.0,)

    def inverse_derivative(self, t: Params, z: FloatArray) -> FloatArray:
        return np.where(z > 0, 0.5 / np.sqrt(np.where(z > 0, z, 1.0)), 0.0)

    def derivative(self, t: Params, y: FloatArray) -> FloatArray:
        return 2.0 * y

    def log_jacobian(self, t: Params, y: FloatArray) -> float:
        return float(y.size * math.log(2.0) + np.sum(np.log(y)))


class Power(Family):
    """x^q; ``exponent`` of ``None`` is a predictor power still to be estimated."""

    name = "power"
    cost = 2
    parameters = (EXPONENT_PARAMETER,)
    fits_on_response = True
    domain_statement = "x >= 0 for q > 0, x > 0 for q < 0"
    reading = "no constant-rate reading; q < 0 reverses order"

    def normalise(self, t: Params) -> Values | None:
        if t.exponent is not None and abs(t.exponent) < PARAM_FLOOR:
            # an estimated power this close to 0 is the log (requests refuse such exponents)
            return replace(Values.of(t), name="log", exponent=None, shift=0.0)
        return None

    def is_identity(self, t: Params) -> bool:
        return t.exponent == 1.0

    def increasing(self, t: Params) -> bool:
        return bool(t.exponent and t.exponent > 0)

    def label(self, t: Params, column: str) -> str:
        e = "estimated" if t.exponent is None else fmt_param(t.exponent)
        return f"power({column}, exponent={e})"

    def domain(self, t: Params, as_sent: bool = False) -> Domain:
        """x >= 0 for q > 0; x > 0 for q < 0 (and for a power still to be estimated)."""
        return NON_NEGATIVE if (t.exponent or 0.0) > 0 else POSITIVE

    def forward(self, t: Params, x: FloatArray) -> FloatArray:
        return np.power(x, exponent_of(t))

    def inverse(self, t: Params, z: FloatArray) -> FloatArray:
        q = exponent_of(t)
        if q > 0:
            return np.power(np.maximum(z, 0.0), 1.0 / q)
        return np.where(z > 0, np.power(np.where(z > 0, z, 1.0), 1.0 / q), np.nan)

    def inverse_singularities(self, t: Params) -> tuple[float, ...]:
        return (0.0,)

    def inverse_derivative(self, t: Params, z: FloatArray) -> FloatArray:
        a = 1.0 / exponent_of(t)
        ok = z > 0
        val = np.power(np.where(ok, z, 1.0), a - 1.0) * a
        return np.where(ok, val, 0.0 if a > 0 else np.nan)

    def derivative(self, t: Params, y: FloatArray) -> FloatArray:
        q = exponent_of(t)
        return q * np.power(y, q - 1.0)

    def log_jacobian(self, t: Params, y: FloatArray) -> float:
        q = exponent_of(t)
        return float(y.size * math.log(abs(q)) + (q - 1.0) * np.sum(np.log(y)))
