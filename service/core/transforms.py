"""Transformations of a response or a numeric predictor.

Each family provides ``forward``, ``inverse`` (``nan`` where the inverse is
undefined, the caller decides what that means), a domain check with a message
that names the fix, the summed log-Jacobian ``sum log|g'(y)|`` used to put
likelihoods of different response scales on the original scale, and a label.

Families whose parameter is estimated from data (Box-Cox and Yeo-Johnson
``lambda`` of a response; the shift of a log when the column holds zeros) are
first created *unfitted* and turned into a concrete transform by
:func:`service.core.likelihood.fit_transform` on the rows at hand, so that cross-validation can
re-estimate them inside every training fold.

References: Box & Cox (1964) JRSS B 26:211-252; Yeo & Johnson (2000)
Biometrika 87:954-959; Tukey (1977) *Exploratory Data Analysis* (ladder of
powers).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

import numpy as np

from ._types import FloatArray
from .numbers import fmt_param

LADDER = (-1.0, -0.5, 0.0, 0.5, 1.0, 2.0)
_EPS = float(np.spacing(1.0)) * 64
# Box-Cox / Yeo-Johnson lambdas with |lambda| below this are the log (lambda 0), and a
# Yeo-Johnson lambda this close to 2 is 2: the inverses raise to the power 1/lambda, whose
# cost and range grow without bound as lambda -> 0, while the scale differs from the log's
# by less than lambda (log y)^2 / 2.  A power exponent must be at least this far from 0.
PARAM_FLOOR = 1e-3
EXPONENT_FLOOR = PARAM_FLOOR


def _fmt_param(v: float) -> str:
    return fmt_param(v)


@dataclass(frozen=True)
class Transform:
    """A transformation ``g``.  ``lam``/``shift`` of ``None`` mean "estimate from data"."""

    name: str
    exponent: float | None = None
    lam: float | None = None
    shift: float | None = None
    estimated: bool = False  # True when lam/shift came from the data
    reference: str | None = None  # categorical only

    def __post_init__(self) -> None:
        lam = self.lam
        if self.name in ("box_cox", "yeo_johnson") and lam is not None:
            if lam != 0.0 and abs(lam) < PARAM_FLOOR:
                object.__setattr__(self, "lam", 0.0)
            elif self.name == "yeo_johnson" and lam != 2.0 and abs(lam - 2.0) < PARAM_FLOOR:
                object.__setattr__(self, "lam", 2.0)
        if self.name == "power" and self.exponent is not None and abs(self.exponent) < PARAM_FLOOR:
            # an estimated power this close to 0 is the log (requests refuse such exponents)
            object.__setattr__(self, "name", "log")
            object.__setattr__(self, "exponent", None)
            object.__setattr__(self, "shift", 0.0)

    def _lambda(self) -> float:
        """The Box-Cox / Yeo-Johnson ``lambda``; an unfitted transform has none to use."""
        if self.lam is None:
            raise ValueError(f"transform {self.name!r} has no lambda yet; fit it first")
        return self.lam

    def _exponent(self) -> float:
        """The exponent of a ``power`` transform; one without it cannot be applied."""
        if self.exponent is None:
            raise ValueError(f"transform {self.name!r} has no exponent")
        return self.exponent

    # ------------------------------------------------------------------ facts
    @property
    def is_fitted(self) -> bool:
        if self.name in ("box_cox", "yeo_johnson"):
            return self.lam is not None
        if self.name == "log":
            return self.shift is not None
        return True

    @property
    def is_identity(self) -> bool:
        return self.name == "identity" or (self.name == "power" and self.exponent == 1.0)

    @property
    def increasing(self) -> bool:
        if self.name == "reciprocal":
            return False
        if self.name == "power":
            return bool(self.exponent and self.exponent > 0)
        return True

    @property
    def n_estimated(self) -> int:
        """Parameters estimated from the response (count in AIC/BIC)."""
        return 1 if (self.estimated and self.name in ("box_cox", "yeo_johnson", "power")) else 0

    @property
    def simplicity(self) -> int:
        """Readability cost (design choice, see DEVELOPERS.md): lower reads easier."""
        if self.name == "identity":
            return 0
        if self.name == "log":
            return 4 if (self.shift or 0.0) != 0.0 else 1
        if self.name in ("sqrt", "reciprocal", "square", "power"):
            return 2
        if self.name in ("box_cox", "yeo_johnson"):
            return 3
        return 2

    def label(self, column: str) -> str:
        """How the transformed column is written in equations, tables and sentences.

        One rule: a transform without a parameter in ordinary notation (``log(x)``,
        ``sqrt(x)``, ``1/x``, ``x^2``); a transform with a parameter as its API name with the
        parameter's API field, ``name(column, field=value)`` (``log(x, shift=3)``,
        ``power(x, exponent=0.5)``, ``box_cox(y, lambda=-0.005061)``,
        ``yeo_johnson(x, lambda=0.5)``); a parameter still to be estimated reads
        ``field=estimated``.
        """
        n = self.name
        if n == "identity" or n == "categorical":
            return column
        if n == "log":
            if self.shift:
                return f"log({column}, shift={_fmt_param(self.shift)})"
            return f"log({column})"
        if n == "sqrt":
            return f"sqrt({column})"
        if n == "reciprocal":
            return f"1/{column}"
        if n == "square":
            return f"{column}^2"
        if n == "power":
            e = "estimated" if self.exponent is None else _fmt_param(self.exponent)
            return f"power({column}, exponent={e})"
        if n in ("box_cox", "yeo_johnson"):
            lam = "estimated" if self.lam is None else _fmt_param(self.lam)
            return f"{n}({column}, lambda={lam})"
        return f"{n}({column})"

    def to_dict(self) -> dict[str, Any]:
        d: dict[str, Any] = {"name": self.name}
        if self.name == "power":
            d["exponent"] = self.exponent
        if self.name in ("box_cox", "yeo_johnson") and self.lam is not None:
            d["lambda"] = self.lam
        if self.name == "log" and self.shift:
            d["shift"] = self.shift
        if self.name == "categorical" and self.reference is not None:
            d["reference"] = self.reference
        if self.estimated:
            d["estimated"] = True
        return d

    # --------------------------------------------------------------- domains
    def domain_problem(self, x: np.ndarray, column: str, role: str) -> str | None:
        """``None`` if ``g`` can be applied to every value of ``x``, else a message with the fix."""
        n = self.name
        lo = float(np.min(x)) if x.size else 0.0
        if n in ("identity", "categorical", "yeo_johnson"):
            return None
        if n == "log":
            if self.shift is None:  # shift chosen from data when there are zeros
                if lo < 0:
                    return (
                        f"{role} '{column}' has negative values (minimum {lo:.6g}); log needs "
                        "values >= 0 (zeros get a shift); use yeo_johnson or give log an "
                        "explicit 'shift'"
                    )
                return None
            if lo + self.shift <= 0:
                return (
                    f"{role} '{column}' plus shift {self.shift:.6g} is not positive "
                    f"everywhere (minimum {lo:.6g}); log needs values > 0; use a larger "
                    "shift or yeo_johnson"
                )
            return None
        if n in ("sqrt", "square"):
            if lo < 0:
                return (
                    f"{role} '{column}' has negative values (minimum {lo:.6g}); {n} needs "
                    "values >= 0; use yeo_johnson"
                )
            return None
        if n == "power" and self.exponent is not None and self.exponent > 0:
            if lo < 0:
                return (
                    f"{role} '{column}' has negative values (minimum {lo:.6g}); power "
                    "needs values >= 0; use yeo_johnson"
                )
            return None
        if n in ("reciprocal", "power", "box_cox"):
            if lo <= 0:
                return (
                    f"{role} '{column}' has values <= 0 (minimum {lo:.6g}); {n} needs "
                    "values > 0; use a shifted log or yeo_johnson"
                )
            return None
        return None

    # ---------------------------------------------------------- forward/back
    def forward(self, x: FloatArray) -> FloatArray:
        n = self.name
        x = np.asarray(x, dtype=float)
        if n == "identity":
            return x.copy()
        if n == "log":
            return np.log(x + (self.shift or 0.0))
        if n == "sqrt":
            return np.sqrt(x)
        if n == "reciprocal":
            return 1.0 / x
        if n == "square":
            return x * x
        if n == "power":
            return np.power(x, self._exponent())
        if n == "box_cox":
            return _box_cox(x, self._lambda())
        if n == "yeo_johnson":
            return _yeo_johnson(x, self._lambda())
        raise ValueError(f"transform {n!r} has no numeric forward map")

    def inverse(self, z: np.ndarray) -> np.ndarray:
        """Back to the original scale; ``nan`` where the inverse does not exist.

        Values too large for a float come back as ``inf`` (callers treat any
        non-finite value as a failed back-transform).

        Clipping rules (as in Duan 1983 smearing practice): a square root or an
        increasing power whose argument falls below 0 maps to 0; Box-Cox with
        lambda > 0 clips its base at 0.  Where the original value would be
        unbounded (reciprocal of z <= 0, Box-Cox lambda < 0 with 1 + lambda z <= 0)
        the result is ``nan``.
        """
        n = self.name
        z = np.asarray(z, dtype=float)
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            if n == "identity":
                out = z.copy()
            elif n == "log":
                out = np.exp(z) - (self.shift or 0.0)
            elif n == "sqrt":
                zc = np.maximum(z, 0.0)
                out = zc * zc
            elif n == "square":
                out = np.sqrt(np.maximum(z, 0.0))
            elif n == "power" and self._exponent() > 0:
                out = np.power(np.maximum(z, 0.0), 1.0 / self._exponent())
            elif n == "reciprocal":
                out = np.where(z > 0, 1.0 / np.where(z > 0, z, 1.0), np.nan)
            elif n == "power":
                q = self._exponent()
                if q > 0:
                    out = np.power(np.maximum(z, 0.0), 1.0 / q)
                else:
                    out = np.where(z > 0, np.power(np.where(z > 0, z, 1.0), 1.0 / q), np.nan)
            elif n == "box_cox":
                out = _inv_box_cox(z, self._lambda())
            elif n == "yeo_johnson":
                out = _inv_yeo_johnson(z, self._lambda())
            else:
                raise ValueError(f"transform {n!r} has no inverse")
        out = np.where(np.isfinite(out), out, np.nan)
        return out

    def inverse_singularities(self) -> tuple[float, ...]:
        """Points where g^-1 is not analytic (a pole, a clip or a branch change)."""
        n = self.name
        if n in ("identity", "log"):
            return ()
        if n == "box_cox":
            return () if abs(self._lambda()) < 1e-12 else (-1.0 / self._lambda(),)
        if n == "yeo_johnson":
            lam = self._lambda()
            pts = [] if abs(lam - 1.0) < 1e-12 else [0.0]
            if lam < -1e-12:
                pts.append(-1.0 / lam)
            if lam > 2.0 + 1e-12:
                pts.append(-1.0 / (lam - 2.0))
            return tuple(pts)
        return (0.0,)

    def inverse_derivative(self, z: np.ndarray) -> np.ndarray:
        """d g^-1(z) / dz, with the same clipping as :meth:`inverse` (0 where clipped)."""
        n = self.name
        z = np.asarray(z, dtype=float)
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            if n == "identity":
                out = np.ones_like(z)
            elif n == "log" or (n == "box_cox" and abs(self._lambda()) < 1e-12):
                out = np.exp(z)
            elif n == "sqrt":
                out = 2.0 * np.maximum(z, 0.0)
            elif n == "square":
                out = np.where(z > 0, 0.5 / np.sqrt(np.where(z > 0, z, 1.0)), 0.0)
            elif n == "reciprocal":
                out = np.where(z > 0, -1.0 / (z * z), np.nan)
            elif n in ("power", "box_cox"):
                if n == "power":
                    a = 1.0 / self._exponent()
                    ok = z > 0
                    val = np.power(np.where(ok, z, 1.0), a - 1.0) * a
                else:  # (1 + lam z)^(1/lam - 1) via log1p, accurate for small lam z
                    a, u = 1.0 / self._lambda(), self._lambda() * z
                    ok = u > -1.0
                    val = np.exp((a - 1.0) * np.log1p(np.where(ok, u, 0.0)))
                out = np.where(ok, val, 0.0 if a > 0 else np.nan)
            elif n == "yeo_johnson":
                lam = self._lambda()
                out = np.empty_like(z)
                pos = z >= 0
                zp, zn = z[pos], z[~pos]
                if abs(lam) < 1e-12:
                    out[pos] = np.exp(zp)
                else:
                    u = lam * zp
                    ok = u > -1.0
                    out[pos] = np.where(
                        ok, np.exp((1.0 / lam - 1.0) * np.log1p(np.where(ok, u, 0.0))), np.nan
                    )
                if abs(lam - 2.0) < 1e-12:
                    out[~pos] = np.exp(-zn)
                else:
                    c = 2.0 - lam
                    v = -c * zn
                    ok = v > -1.0
                    out[~pos] = np.where(
                        ok, np.exp((1.0 / c - 1.0) * np.log1p(np.where(ok, v, 0.0))), np.nan
                    )
            else:
                raise ValueError(n)
        return np.where(np.isfinite(out), out, np.nan)

    def derivative(self, y: FloatArray) -> FloatArray:
        """g'(y)."""
        n = self.name
        y = np.asarray(y, dtype=float)
        if n == "identity":
            return np.ones_like(y)
        if n == "log":
            return 1.0 / (y + (self.shift or 0.0))
        if n == "sqrt":
            return 0.5 / np.sqrt(y)
        if n == "reciprocal":
            return -1.0 / (y * y)
        if n == "square":
            return 2.0 * y
        if n == "power":
            return self._exponent() * np.power(y, self._exponent() - 1.0)
        if n == "box_cox":
            return np.power(y, self._lambda() - 1.0)
        if n == "yeo_johnson":
            return np.power(np.abs(y) + 1.0, np.sign(y) * (self._lambda() - 1.0))
        raise ValueError(n)

    def log_jacobian(self, y: np.ndarray) -> float:
        """sum_i log|g'(y_i)|: add to a z-scale log-likelihood to get the y-scale one."""
        n = self.name
        y = np.asarray(y, dtype=float)
        if n == "identity":
            return 0.0
        if n == "log":
            return float(-np.sum(np.log(y + (self.shift or 0.0))))
        if n == "sqrt":
            return float(-y.size * math.log(2.0) - 0.5 * np.sum(np.log(y)))
        if n == "reciprocal":
            return float(-2.0 * np.sum(np.log(y)))
        if n == "square":
            return float(y.size * math.log(2.0) + np.sum(np.log(y)))
        if n == "power":
            q = self._exponent()
            return float(y.size * math.log(abs(q)) + (q - 1.0) * np.sum(np.log(y)))
        if n == "box_cox":
            return float((self._lambda() - 1.0) * np.sum(np.log(y)))
        if n == "yeo_johnson":
            return float((self._lambda() - 1.0) * np.sum(np.sign(y) * np.log1p(np.abs(y))))
        raise ValueError(n)


# ---------------------------------------------------------------- families
def _box_cox(y: FloatArray, lam: float) -> FloatArray:
    ly = np.log(y)
    if abs(lam) < 1e-12:
        return ly
    with np.errstate(over="ignore"):
        return np.expm1(lam * ly) / lam


def _inv_box_cox(z: FloatArray, lam: float) -> FloatArray:
    if abs(lam) < 1e-12:
        return np.exp(z)
    # (1 + lam z)^(1/lam) as exp(log1p(lam z)/lam): keeps full precision when lam z is small
    u = lam * z
    ok = u > -1.0
    val = np.exp(np.log1p(np.where(ok, u, 0.0)) / lam)
    return np.where(ok, val, 0.0 if lam > 0 else np.nan)


def _yeo_johnson(y: FloatArray, lam: float) -> FloatArray:
    out = np.empty_like(y, dtype=float)
    pos = y >= 0
    yp, yn = y[pos], y[~pos]
    with np.errstate(over="ignore"):
        if abs(lam) < 1e-12:
            out[pos] = np.log1p(yp)
        else:
            out[pos] = np.expm1(lam * np.log1p(yp)) / lam
        if abs(lam - 2.0) < 1e-12:
            out[~pos] = -np.log1p(-yn)
        else:
            out[~pos] = -np.expm1((2.0 - lam) * np.log1p(-yn)) / (2.0 - lam)
    return out


def _inv_yeo_johnson(z: FloatArray, lam: float) -> FloatArray:
    out = np.empty_like(z, dtype=float)
    pos = z >= 0
    zp, zn = z[pos], z[~pos]
    if abs(lam) < 1e-12:
        out[pos] = np.expm1(zp)
    else:
        u = lam * zp  # log1p keeps full precision when lam z is small
        ok = u > -1.0
        out[pos] = np.where(ok, np.expm1(np.log1p(np.where(ok, u, 0.0)) / lam), np.nan)
    if abs(lam - 2.0) < 1e-12:
        out[~pos] = -np.expm1(-zn)
    else:
        v = -(2.0 - lam) * zn
        ok = v > -1.0
        out[~pos] = np.where(ok, -np.expm1(np.log1p(np.where(ok, v, 0.0)) / (2.0 - lam)), np.nan)
    return out


# ------------------------------------------------------------- constructors
NUMERIC_NAMES = (
    "identity",
    "log",
    "sqrt",
    "reciprocal",
    "square",
    "power",
    "box_cox",
    "yeo_johnson",
)
ALL_NAMES = (*NUMERIC_NAMES, "categorical")


def from_dict(d: dict[str, Any]) -> Transform:
    """Build from a contract Transform object (already type-checked by the caller)."""
    name = d["name"]
    if name == "power":
        return Transform("power", exponent=float(d["exponent"]))
    if name in ("box_cox", "yeo_johnson"):
        lam = d.get("lambda")
        return Transform(
            name, lam=None if lam is None else float(lam), estimated=bool(d.get("estimated", False))
        )
    if name == "log":
        shift = d.get("shift")
        return Transform(
            "log",
            shift=None if shift is None or shift == "auto" else float(shift),
            estimated=bool(d.get("estimated", False)),
        )
    if name == "categorical":
        return Transform("categorical", reference=d.get("reference"))
    return Transform(name)


def outside_domain(t: Transform, x: np.ndarray, strict_log: bool) -> np.ndarray:
    """Mask of the values ``t`` cannot take.  ``strict_log``: a log without a shift is
    taken as asked, so zeros are outside its domain too (no shift is added)."""
    n = t.name
    with np.errstate(invalid="ignore"):
        if n == "log":
            if t.shift is None:
                return x <= 0 if strict_log else x < 0
            return x + t.shift <= 0
        if n in ("sqrt", "square") or (n == "power" and (t.exponent or 0) > 0):
            return x < 0
        if n in ("reciprocal", "power", "box_cox"):
            return x <= 0
    return np.zeros(x.shape, bool)


def domain_fixes(t: Transform) -> str:
    """The fixes an explicit transform outside its domain can take, in one clause."""
    if t.name == "log":
        return (
            "give log an explicit numeric 'shift' that makes every value positive, send "
            '"shift": "auto" to let the service choose one (half the smallest positive '
            "value), or use yeo_johnson"
        )
    return 'use yeo_johnson, or a log with an explicit numeric \'shift\' or "shift": "auto"'


def chosen_shift(x: np.ndarray) -> float:
    """Shift for log(x + c) when x has zeros: half the smallest positive value (common practice)."""
    pos = x[x > 0]
    if pos.size == 0:
        return 1.0
    return float(0.5 * np.min(pos))


def needs_shift(x: np.ndarray) -> bool:
    return bool(np.min(x) <= 0)


def ladder_transform(power: float) -> Transform:
    """The named transform for a rung of the ladder of powers (Tukey 1977)."""
    if abs(power) < _EPS:
        return Transform("log")  # shift decided from the data, like the default candidate
    if abs(power - 1.0) < _EPS:
        return Transform("identity")
    if abs(power - 0.5) < _EPS:
        return Transform("sqrt")
    if abs(power + 1.0) < _EPS:
        return Transform("reciprocal")
    if abs(power - 2.0) < _EPS:
        return Transform("square")
    return Transform("power", exponent=float(power))


#: bounds of the parameters a request may send (the request schema uses the same numbers)
SHIFT_BOUND = 1e15
EXPONENT_BOUND = 10.0
LAMBDA_BOUND = 5.0
REFERENCE_MAX_CHARS = 256

# What happens when a parameter is left out, by where the transform is named: "response"
# (specification.response, transforms.response, an incumbent's response), "predictor" (a
# predictor of a specification or an incumbent) and "predictor_search"
# (transforms.predictors).  "required": a 422; "estimated": from the data; "default": the
# parameter's default.
_SHIFT = {
    "name": "shift",
    "type": 'number or "auto"',
    "minimum": -SHIFT_BOUND,
    "maximum": SHIFT_BOUND,
    "default": None,
    "when_omitted": {"response": "default", "predictor": "default", "predictor_search": "default"},
    "example": 1.0,
    "meaning": 'a constant added before the log (log(x + shift)), or "auto" to let the '
    "service choose half the smallest positive value when the column has zeros; without a "
    "shift (the default) a requested log is used as sent and needs values > 0; the default "
    "search adds a chosen shift on its own and labels it",
}
_EXPONENT = {
    "name": "exponent",
    "type": "number",
    "minimum": -EXPONENT_BOUND,
    "maximum": EXPONENT_BOUND,
    "default": None,
    "when_omitted": {
        "response": "required",
        "predictor": "required",
        "predictor_search": "estimated",
    },
    "example": 0.25,
    "meaning": f"the exponent q in x^q, {PARAM_FLOOR:g} <= |q| <= {EXPONENT_BOUND:g} (use log for "
    "0); in transforms.predictors omit it (or send estimated: true) to estimate the "
    "predictor's power from the data (Box & Tidwell 1962)",
}


def _lam(family: str) -> dict[str, object]:
    return {
        "name": "lambda",
        "type": "number",
        "minimum": -LAMBDA_BOUND,
        "maximum": LAMBDA_BOUND,
        "default": None,
        "when_omitted": {
            "response": "estimated",
            "predictor": "required",
            "predictor_search": "required",
        },
        "example": 0.5,
        "meaning": f"the {family} lambda; |lambda| < {PARAM_FLOOR:g} is read as 0 (the log)"
        + (f" and |lambda - 2| < {PARAM_FLOOR:g} as 2" if family == "Yeo-Johnson" else "")
        + "; omit it on the response to estimate it by the profile likelihood of the whole "
        "model; a predictor needs a fixed lambda (for an estimated predictor power use power)",
    }


CATALOGUE = [
    {
        "name": "identity",
        "parameters": [],
        "domain": "any real value",
        "applies_to": ["response", "predictor"],
        "reading": "a slope is the change in the response (or in the model scale) per unit of x",
    },
    {
        "name": "log",
        "parameters": [_SHIFT],
        "domain": 'x + shift > 0 (without a shift: x > 0; "auto": x >= 0)',
        "applies_to": ["response", "predictor"],
        "reading": "log response: one unit of x multiplies the median response by exp(b), i.e. "
        "100(exp(b)-1)% ; log predictor: a 1% increase in x changes the model scale by "
        "b·ln(1.01); log-log: b is an elasticity",
    },
    {
        "name": "sqrt",
        "parameters": [],
        "domain": "x >= 0",
        "applies_to": ["response", "predictor"],
        "reading": "no constant-rate reading; effects are reported as back-transformed predictions "
        "at two values of x",
    },
    {
        "name": "reciprocal",
        "parameters": [],
        "domain": "x > 0",
        "applies_to": ["response", "predictor"],
        "reading": "1/x reverses order: a positive slope on 1/y means y falls as x rises",
    },
    {
        "name": "square",
        "parameters": [],
        "domain": "x >= 0",
        "applies_to": ["response", "predictor"],
        "reading": "no constant-rate reading; effects are reported at two values of x",
    },
    {
        "name": "power",
        "parameters": [_EXPONENT],
        "domain": "x >= 0 for q > 0, x > 0 for q < 0",
        "applies_to": ["response", "predictor"],
        "reading": "no constant-rate reading; q < 0 reverses order",
    },
    {
        "name": "box_cox",
        "parameters": [_lam("Box-Cox")],
        "domain": "x > 0",
        "applies_to": ["response", "predictor"],
        "reading": "(x^λ - 1)/λ, log at λ = 0; no constant-rate reading",
    },
    {
        "name": "yeo_johnson",
        "parameters": [_lam("Yeo-Johnson")],
        "domain": "any real value (not scale invariant)",
        "applies_to": ["response", "predictor"],
        "reading": "Box-Cox-like power of x + 1 (and of 1 - x for negatives); no constant-rate reading",
    },
    {
        "name": "categorical",
        "parameters": [
            {
                "name": "reference",
                "type": "string",
                "min_length": 1,
                "max_length": REFERENCE_MAX_CHARS,
                "default": "the first level in sorted order",
                "when_omitted": {"predictor": "default", "predictor_search": "default"},
                "example": None,
                "meaning": "the baseline level the other levels are compared with",
            }
        ],
        "domain": "any values, read as levels",
        "applies_to": ["predictor"],
        "reading": "treatment dummies: each level's coefficient is its difference from the reference "
        "level on the model scale (a percent difference under a log response)",
    },
]
