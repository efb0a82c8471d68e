"""Box-Cox: (x^lambda - 1) / lambda, the log at lambda = 0 (Box & Cox 1964)."""

from __future__ import annotations

import numpy as np

from .._types import FloatArray
from .family import POSITIVE, Domain, LambdaFamily, Params, lam_of, lambda_parameter


def box_cox_map(y: FloatArray, lam: float) -> FloatArray:
    ly = np.log(y)
    if abs(lam) < 1e-12:
        return ly
    with np.errstate(over="ignore"):
        return np.expm1(lam * ly) / lam


def inverse_box_cox_map(z: FloatArray, lam: float) -> FloatArray:
    """(1 + lam z)^(1/lam); its base clips at 0 for lam > 0 and has no value (``nan``) for
    lam < 0 where 1 + lam z <= 0."""
    if abs(lam) < 1e-12:
        return np.exp(z)
    # (1 + lam z)^(1/lam) as exp(log1p(lam z)/lam): keeps full precision when lam z is small
    u = lam * z
    ok = u > -1.0
    val = np.exp(np.log1p(np.where(ok, u, 0.0)) / lam)
    return np.where(ok, val, 0.0 if lam > 0 else np.nan)


class BoxCox(LambdaFamily):
    name = "box_cox"
    parameters = (lambda_parameter("Box-Cox"),)
    domain_statement = "x > 0"
    reading = "(x^λ - 1)/λ, log at λ = 0; no constant-rate reading"

    def domain(self, t: Params, as_sent: bool = False) -> Domain:
        return POSITIVE

    def forward(self, t: Params, x: FloatArray) -> FloatArray:
        return box_cox_map(x, lam_of(t))

    def inverse(self, t: Params, z: FloatArray) -> FloatArray:
        return inverse_box_cox_map(z, lam_of(t))

    def inverse_singularities(self, t: Params) -> tuple[float, ...]:
        lam = lam_of(t)
        return () if abs(lam) < 1e-12 else (-1.0 / lam,)

    def inverse_derivative(self, t: Params, z: FloatArray) -> FloatArray:
        lam = lam_of(t)
        if abs(lam) < 1e-12:
            return np.exp(z)
        # (1 + lam z)^(1/lam - 1) via log1p, accurate for small lam z
        a, u = 1.0 / lam, lam * z
        ok = u > -1.0
        val = np.exp((a - 1.0) * np.log1p(np.where(ok, u, 0.0)))
        return np.where(ok, val, 0.0 if a > 0 else np.nan)

    def derivative(self, t: Params, y: FloatArray) -> FloatArray:
        return np.power(y, lam_of(t) - 1.0)

    def log_jacobian(self, t: Params, y: FloatArray) -> float:
        return float((lam_of(t) - 1.0) * np.sum(np.log(y)))
