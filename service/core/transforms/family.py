"""The interface every transform family implements, and the domain a transform can take.

A family is a stateless object (one per name, see :mod:`.registry`); its methods take the
transform's parameters (:class:`Params`, in practice a :class:`~.value.Transform`) and the
values.  :class:`~.value.Transform` is the frozen value callers build, compare and hash; it
hands every family-specific question to its family.

The numeric maps here are raw: ``Transform.inverse`` and ``Transform.inverse_derivative``
silence floating-point warnings and turn every non-finite result into ``nan`` for all
families at once.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from dataclasses import dataclass, replace
from typing import ClassVar, Protocol

import numpy as np

from .._types import AnyArray, BoolArray, FloatArray
from ..numbers import fmt_param
from .bounds import LAMBDA_BOUND, PARAM_FLOOR


class Params(Protocol):
    """What a family reads of a transform: its name and parameters (``None`` = open)."""

    @property
    def name(self) -> str: ...
    @property
    def exponent(self) -> float | None: ...
    @property
    def lam(self) -> float | None: ...
    @property
    def shift(self) -> float | None: ...
    @property
    def estimated(self) -> bool: ...
    @property
    def reference(self) -> str | None: ...


@dataclass(frozen=True)
class Values:
    """A transform's name and parameters, as :meth:`Family.normalise` hands them back."""

    name: str
    exponent: float | None = None
    lam: float | None = None
    shift: float | None = None
    estimated: bool = False
    reference: str | None = None

    @classmethod
    def of(cls, t: Params) -> Values:
        return cls(t.name, t.exponent, t.lam, t.shift, t.estimated, t.reference)


def lam_of(t: Params) -> float:
    """The Box-Cox / Yeo-Johnson ``lambda``; an unfitted transform has none to use."""
    if t.lam is None:
        raise ValueError(f"transform {t.name!r} has no lambda yet; fit it first")
    return t.lam


def exponent_of(t: Params) -> float:
    """The exponent of a ``power`` transform; one without it cannot be applied."""
    if t.exponent is None:
        raise ValueError(f"transform {t.name!r} has no exponent")
    return t.exponent


def _bound_text(v: float) -> str:
    return "0" if v == 0 else f"{v:.6g}"


@dataclass(frozen=True)
class Domain:
    """The values a transform can take: every ``x > bound`` (``strict``) or ``x >= bound``;
    ``bound`` of ``None``: every real value (such a transform fails only by overflowing).

    Every family's domain is such a half-line, so one mask and one wording serve the
    search's checks, the refusal of an explicit transform and the check of new rows.
    """

    bound: float | None = None
    strict: bool = False

    def mask(self, x: AnyArray) -> BoolArray:
        """True where ``x`` lies in the domain.  ``nan`` (a missing value, which callers
        handle before) is not judged here and counts as inside."""
        x = np.asarray(x, dtype=float)
        if self.bound is None:
            return np.ones(x.shape, dtype=bool)
        with np.errstate(invalid="ignore"):
            outside = x <= self.bound if self.strict else x < self.bound
        return np.asarray(~outside, dtype=bool)

    @property
    def text(self) -> str:
        """The domain in messages, the one wording: ``values > 0``, ``values >= 0``,
        ``values > -2.5``, ``values where it is finite``."""
        if self.bound is None:
            return "values where it is finite"
        return f"values {'>' if self.strict else '>='} {_bound_text(self.bound)}"

    @property
    def breach(self) -> str:
        """What a column whose smallest value lies outside the domain has."""
        if self.bound is None:
            return "has values where it is not finite"
        if self.strict:
            return f"has values <= {_bound_text(self.bound)}"
        if self.bound == 0:
            return "has negative values"
        return f"has values < {_bound_text(self.bound)}"


@dataclass(frozen=True)
class WhenOmitted:
    """What an omitted parameter means in each place a transform may be named (None: the
    family is not named there): "required", "default" or "estimated"."""

    response: str | None = None
    predictor: str | None = None
    predictor_search: str | None = None


@dataclass(frozen=True)
class Parameter:
    """A family's parameter as the catalogue (GET /v1/transforms) describes it: ``field``,
    its name in a transform object, ``kind`` its type in words, its ``bounds`` (numbers) or
    ``length`` (strings), ``default``, what omitting it means, an ``example`` and its
    ``meaning``.

    How a transform object carries it (``service/api/render/specs.py`` writes and reads the
    object from these): ``attribute``, the :class:`~.value.Transform` attribute that holds
    it (default: ``field``); ``unwritten``, the values the object leaves out (they read back
    as unset); ``open_word``, a word a request may send instead of a value to leave it to
    the data (read as unset)."""

    field: str
    kind: str
    when_omitted: WhenOmitted
    example: float | None
    meaning: str
    default: str | None = None
    bounds: tuple[float, float] | None = None
    length: tuple[int, int] | None = None
    attribute: str | None = None
    unwritten: tuple[object, ...] = (None,)
    open_word: str | None = None

    @property
    def held_in(self) -> str:
        """The :class:`~.value.Transform` attribute holding the parameter."""
        return self.field if self.attribute is None else self.attribute

    def written(self, value: object) -> bool:
        """Whether a transform object shows ``value`` (else it leaves the field out)."""
        return value not in self.unwritten


EVERYWHERE = Domain()
NON_NEGATIVE = Domain(0.0, strict=False)
POSITIVE = Domain(0.0, strict=True)


class Family(ABC):
    """One transform family: its maps, its domain, how it is written and catalogued."""

    #: the API name (the registry's key)
    name: ClassVar[str]
    #: readability cost in the simplicity key (design choice, DEVELOPERS.md "Ranking rule")
    cost: ClassVar[int]
    #: the catalogue's statement of the domain, for every value of the parameters
    domain_statement: ClassVar[str]
    #: the catalogue's reading of a coefficient on this scale
    reading: ClassVar[str]
    #: the catalogue's parameter entries (type, bounds, default, when omitted, meaning)
    parameters: ClassVar[tuple[Parameter, ...]] = ()
    #: where the family may be named
    applies_to: ClassVar[tuple[str, ...]] = ("response", "predictor")
    #: False for a family with no numeric map (categorical columns)
    numeric: ClassVar[bool] = True
    #: True when the family's parameter is a lambda estimated from the response if omitted
    has_lambda: ClassVar[bool] = False
    #: True when an estimated parameter of the family is fitted on the response (it then
    #: counts in AIC/BIC)
    fits_on_response: ClassVar[bool] = False
    #: True when a transform read back from its object form keeps the ``estimated`` mark (a
    #: lambda or a log shift chosen from the data); otherwise only the parameters are read
    keeps_estimated: ClassVar[bool] = False

    # ------------------------------------------------------------ the value
    def normalise(self, t: Params) -> Values | None:
        """The values a transform is built with when they differ from those given (a
        parameter read as a limit); None: as given."""
        return None

    def is_fitted(self, t: Params) -> bool:
        """False while a parameter waits to be estimated from the rows at hand."""
        return True

    def is_identity(self, t: Params) -> bool:
        return False

    def increasing(self, t: Params) -> bool:
        return True

    def simplicity(self, t: Params) -> int:
        return self.cost

    @abstractmethod
    def label(self, t: Params, column: str) -> str:
        """The transformed column in equations (rule: :meth:`Transform.label`)."""

    # ------------------------------------------------------------ the domain
    @abstractmethod
    def domain(self, t: Params, as_sent: bool = False) -> Domain:
        """The values ``t`` can take.  ``as_sent``: the transform is applied exactly as
        sent (a log without a shift then adds none for zeros)."""

    def domain_problem(self, t: Params, x: FloatArray, column: str, role: str) -> str | None:
        """``None`` if ``t`` can be applied to every value of ``x``, else a message with the fix."""
        d = self.domain(t)
        if d.bound is None:
            return None
        lo = float(np.min(x)) if x.size else 0.0
        if d.mask(np.array(lo)):
            return None
        return self.complaint(t, d, lo, column, role)

    def complaint(self, t: Params, d: Domain, lo: float, column: str, role: str) -> str:
        """The message of :meth:`domain_problem` when the smallest value ``lo`` is outside."""
        fix = "use a shifted log or yeo_johnson" if d.strict else "use yeo_johnson"
        return f"{role} '{column}' {d.breach} (minimum {lo:.6g}); {t.name} needs {d.text}; {fix}"

    def fixes(self, t: Params) -> str:
        """The fixes of an explicitly requested transform outside its domain, one clause."""
        return 'use yeo_johnson, or a log with an explicit numeric \'shift\' or "shift": "auto"'

    # ------------------------------------------------------------ the maps
    @abstractmethod
    def forward(self, t: Params, x: FloatArray) -> FloatArray:
        """g(x)."""

    @abstractmethod
    def inverse(self, t: Params, z: FloatArray) -> FloatArray:
        """g^-1(z), clipped where the family's rule says so (see ``Transform.inverse``)."""

    @abstractmethod
    def inverse_singularities(self, t: Params) -> tuple[float, ...]:
        """Points where g^-1 is not analytic (a pole, a clip or a branch change)."""

    @abstractmethod
    def inverse_derivative(self, t: Params, z: FloatArray) -> FloatArray:
        """d g^-1(z) / dz with the clipping of :meth:`inverse` (0 where clipped)."""

    @abstractmethod
    def derivative(self, t: Params, y: FloatArray) -> FloatArray:
        """g'(y)."""

    @abstractmethod
    def log_jacobian(self, t: Params, y: FloatArray) -> float:
        """sum_i log|g'(y_i)|."""


def lambda_parameter(family: str) -> Parameter:
    """The catalogue entry of a Box-Cox / Yeo-Johnson lambda."""
    return Parameter(
        field="lambda",
        attribute="lam",
        kind="number",
        bounds=(-LAMBDA_BOUND, LAMBDA_BOUND),
        when_omitted=WhenOmitted("estimated", "required", "required"),
        example=0.5,
        meaning=f"the {family} lambda; |lambda| < {PARAM_FLOOR:g} is read as 0 (the log)"
        + (f" and |lambda - 2| < {PARAM_FLOOR:g} as 2" if family == "Yeo-Johnson" else "")
        + "; omit it on the response to estimate it by the profile likelihood of the whole "
        "model; a predictor needs a fixed lambda (for an estimated predictor power use power)",
    )


class LambdaFamily(Family):
    """A family with a ``lambda`` that the response's rows estimate when it is omitted."""

    cost = 3
    has_lambda = True
    fits_on_response = True
    keeps_estimated = True

    def normalise(self, t: Params) -> Values | None:
        lam = t.lam
        if lam is not None and lam != 0.0 and abs(lam) < PARAM_FLOOR:
            return replace(Values.of(t), lam=0.0)
        return None

    def is_fitted(self, t: Params) -> bool:
        return t.lam is not None

    def label(self, t: Params, column: str) -> str:
        lam = "estimated" if t.lam is None else fmt_param(t.lam)
        return f"{t.name}({column}, lambda={lam})"
