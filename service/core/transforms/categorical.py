"""A categorical predictor: its levels enter as treatment dummies (core/spec.py builds them);
the family has no numeric map."""

from __future__ import annotations

from typing import NoReturn

from .._types import FloatArray
from .bounds import REFERENCE_MAX_CHARS
from .family import EVERYWHERE, Domain, Family, Parameter, Params, WhenOmitted

REFERENCE_PARAMETER = Parameter(
    field="reference",
    kind="string",
    length=(1, REFERENCE_MAX_CHARS),
    default="the first level in sorted order",
    when_omitted=WhenOmitted(None, "default", "default"),
    example=None,
    meaning="the baseline level the other levels are compared with",
)


class Categorical(Family):
    name = "categorical"
    cost = 2  # not counted: Specification.simplicity leaves categorical columns out
    numeric = False
    parameters = (REFERENCE_PARAMETER,)
    applies_to = ("predictor",)
    domain_statement = "any values, read as levels"
    reading = (
        "treatment dummies: each level's coefficient is its difference from the reference "
        "level on the model scale (a percent difference under a log response)"
    )

    def label(self, t: Params, column: str) -> str:
        return column

    def domain(self, t: Params, as_sent: bool = False) -> Domain:
        return EVERYWHERE

    def _no_map(self, what: str) -> NoReturn:
        raise ValueError(f"transform {self.name!r} has no {what}: its levels enter as dummies")

    def forward(self, t: Params, x: FloatArray) -> FloatArray:
        self._no_map("numeric forward map")

    def inverse(self, t: Params, z: FloatArray) -> FloatArray:
        self._no_map("inverse")

    def inverse_singularities(self, t: Params) -> tuple[float, ...]:
        self._no_map("inverse")

    def inverse_derivative(self, t: Params, z: FloatArray) -> FloatArray:
        self._no_map("inverse")

    def derivative(self, t: Params, y: FloatArray) -> FloatArray:
        self._no_map("derivative")

    def log_jacobian(self, t: Params, y: FloatArray) -> float:
        self._no_map("Jacobian")
