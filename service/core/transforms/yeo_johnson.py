"""Yeo-Johnson: a Box-Cox-like power of x + 1 for x >= 0 and of 1 - x (with 2 - lambda)
for x < 0, defined for every real x (Yeo & Johnson 2000)."""

from __future__ import annotations

from dataclasses import replace

import numpy as np

from .._types import FloatArray
from .bounds import PARAM_FLOOR
from .family import EVERYWHERE, Domain, LambdaFamily, Params, Values, lam_of, lambda_parameter


def yeo_johnson_map(y: FloatArray, lam: float) -> FloatArray:
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


def inverse_yeo_johnson_map(z: FloatArray, lam: float) -> FloatArray:
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


class YeoJohnson(LambdaFamily):
    name = "yeo_johnson"
    parameters = (lambda_parameter("Yeo-Johnson"),)
    domain_statement = "any real value (not scale invariant)"
    reading = "Box-Cox-like power of x + 1 (and of 1 - x for negatives); no constant-rate reading"

    def normalise(self, t: Params) -> Values | None:
        lam = t.lam
        if lam is not None and lam != 2.0 and abs(lam - 2.0) < PARAM_FLOOR:
            return replace(Values.of(t), lam=2.0)
        return super().normalise(t)

    def domain(self, t: Params, as_sent: bool = False) -> Domain:
        return EVERYWHERE

    def forward(self, t: Params, x: FloatArray) -> FloatArray:
        return yeo_johnson_map(x, lam_of(t))

    def inverse(self, t: Params, z: FloatArray) -> FloatArray:
        return inverse_yeo_johnson_map(z, lam_of(t))

    def inverse_singularities(self, t: Params) -> tuple[float, ...]:
        lam = lam_of(t)
        pts = [] if abs(lam - 1.0) < 1e-12 else [0.0]
        if lam < -1e-12:
            pts.append(-1.0 / lam)
        if lam > 2.0 + 1e-12:
            pts.append(-1.0 / (lam - 2.0))
        return tuple(pts)

    def inverse_derivative(self, t: Params, z: FloatArray) -> FloatArray:
        lam = lam_of(t)
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
        return out

    def derivative(self, t: Params, y: FloatArray) -> FloatArray:
        return np.power(np.abs(y) + 1.0, np.sign(y) * (lam_of(t) - 1.0))

    def log_jacobian(self, t: Params, y: FloatArray) -> float:
        return float((lam_of(t) - 1.0) * np.sum(np.sign(y) * np.log1p(np.abs(y))))
