"""``Transform``: the frozen value callers build, compare, hash and store; every question
that depends on the family goes to ``FAMILIES[name]``."""

from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np

from .._types import BoolArray, FloatArray
from .bounds import LADDER_EPS
from .family import Domain, Family
from .registry import family_of


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
        values = family_of(self.name).normalise(self)
        if values is not None:
            for f in fields(values):
                object.__setattr__(self, f.name, getattr(values, f.name))

    @property
    def family(self) -> Family:
        return family_of(self.name)

    # ------------------------------------------------------------------ facts
    @property
    def is_fitted(self) -> bool:
        return self.family.is_fitted(self)

    @property
    def needs_lambda(self) -> bool:
        """A Box-Cox / Yeo-Johnson transform whose lambda the rows at hand must estimate."""
        return self.family.has_lambda and self.lam is None

    @property
    def is_identity(self) -> bool:
        return self.family.is_identity(self)

    @property
    def increasing(self) -> bool:
        return self.family.increasing(self)

    @property
    def n_estimated(self) -> int:
        """Parameters estimated from the response (count in AIC/BIC)."""
        return 1 if (self.estimated and self.family.fits_on_response) else 0

    @property
    def simplicity(self) -> int:
        """Readability cost (design choice, see DEVELOPERS.md): lower reads easier."""
        return self.family.simplicity(self)

    def label(self, column: str) -> str:
        """How the transformed column is written in equations, tables and sentences.

        One rule: a transform without a parameter in ordinary notation (``log(x)``,
        ``sqrt(x)``, ``1/x``, ``x^2``); a transform with a parameter as its API name with the
        parameter's API field, ``name(column, field=value)`` (``log(x, shift=3)``,
        ``power(x, exponent=0.5)``, ``box_cox(y, lambda=-0.005061)``,
        ``yeo_johnson(x, lambda=0.5)``); a parameter still to be estimated reads
        ``field=estimated``.
        """
        return self.family.label(self, column)

    # --------------------------------------------------------------- domains
    def domain(self, as_sent: bool = False) -> Domain:
        """The values ``g`` can take (``as_sent``: a log without a shift adds none for zeros)."""
        return self.family.domain(self, as_sent)

    def domain_mask(self, x: FloatArray, as_sent: bool = False) -> BoolArray:
        """True where ``g`` is defined at ``x`` (vectorised; ``nan`` is not judged)."""
        return self.family.domain(self, as_sent).mask(x)

    def domain_text(self, as_sent: bool = False) -> str:
        """The domain in one phrase for messages, e.g. ``values > 0``."""
        return self.family.domain(self, as_sent).text

    def domain_problem(self, x: np.ndarray, column: str, role: str) -> str | None:
        """``None`` if ``g`` can be applied to every value of ``x``, else a message with the fix."""
        return self.family.domain_problem(self, x, column, role)

    def domain_fixes(self) -> str:
        """The fixes an explicit transform outside its domain can take, in one clause."""
        return self.family.fixes(self)

    # ---------------------------------------------------------- forward/back
    def forward(self, x: FloatArray) -> FloatArray:
        return self.family.forward(self, np.asarray(x, dtype=float))

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
        z = np.asarray(z, dtype=float)
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            out = self.family.inverse(self, z)
        return np.where(np.isfinite(out), out, np.nan)

    def inverse_singularities(self) -> tuple[float, ...]:
        """Points where g^-1 is not analytic (a pole, a clip or a branch change)."""
        return self.family.inverse_singularities(self)

    def inverse_derivative(self, z: np.ndarray) -> np.ndarray:
        """d g^-1(z) / dz, with the same clipping as :meth:`inverse` (0 where clipped)."""
        z = np.asarray(z, dtype=float)
        with np.errstate(over="ignore", invalid="ignore", divide="ignore"):
            out = self.family.inverse_derivative(self, z)
        return np.where(np.isfinite(out), out, np.nan)

    def derivative(self, y: FloatArray) -> FloatArray:
        """g'(y)."""
        return self.family.derivative(self, np.asarray(y, dtype=float))

    def log_jacobian(self, y: np.ndarray) -> float:
        """sum_i log|g'(y_i)|: add to a z-scale log-likelihood to get the y-scale one."""
        return self.family.log_jacobian(self, np.asarray(y, dtype=float))


def _as_written(t: Transform, estimated: bool) -> Transform:
    family = t.family
    shown = {
        p.held_in: getattr(t, p.held_in)
        for p in family.parameters
        if p.written(getattr(t, p.held_in))
    }
    return Transform(t.name, estimated=estimated, **shown)


def written_alike(t: Transform) -> Transform:
    """``t`` as its object form shows it: each parameter the form leaves out (a log's shift
    of 0, an unset lambda) unset, and every field its family does not take unset.  Two
    transforms are written alike exactly when these are equal."""
    return _as_written(t, t.estimated)


def read_back(t: Transform) -> Transform:
    """``t`` as its object form reads back: :func:`written_alike`, keeping the ``estimated``
    mark only where the family keeps it (a lambda or a log shift chosen from the data)."""
    return _as_written(t, t.estimated and t.family.keeps_estimated)


def ladder_transform(power: float) -> Transform:
    """The named transform for a rung of the ladder of powers (Tukey 1977)."""
    if abs(power) < LADDER_EPS:
        return Transform("log")  # shift decided from the data, like the default candidate
    if abs(power - 1.0) < LADDER_EPS:
        return Transform("identity")
    if abs(power - 0.5) < LADDER_EPS:
        return Transform("sqrt")
    if abs(power + 1.0) < LADDER_EPS:
        return Transform("reciprocal")
    if abs(power - 2.0) < LADDER_EPS:
        return Transform("square")
    return Transform("power", exponent=float(power))
