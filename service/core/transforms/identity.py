"""The identity: the column as it is."""

from __future__ import annotations

import numpy as np

from .._types import FloatArray
from .family import EVERYWHERE, Domain, Family, Params


class Identity(Family):
    name = "identity"
    cost = 0
    domain_statement = "any real value"
    reading = "a slope is the change in the response (or in the model scale) per unit of x"

    def is_identity(self, t: Params) -> bool:
        return True

    def label(self, t: Params, column: str) -> str:
        return column

    def domain(self, t: Params, as_sent: bool = False) -> Domain:
        return EVERYWHERE

    def forward(self, t: Params, x: FloatArray) -> FloatArray:
        return x.copy()

    def inverse(self, t: Params, z: FloatArray) -> FloatArray:
        return z.copy()

    def inverse_singularities(self, t: Params) -> tuple[float, ...]:
        return ()

    def inverse_derivative(self, t: Params, z: FloatArray) -> FloatArray:
        return np.ones_like(z)

    def derivative(self, t: Params, y: FloatArray) -> FloatArray:
        return np.ones_like(y)

    def log_jacobian(self, t: Params, y: FloatArray) -> float:
        return 0.0
