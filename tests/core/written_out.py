"""Back-transforms written out from each family's definition: the reference the smearing
tests compare the service's inverses and smeared means against."""

from __future__ import annotations

import numpy as np
from scipy import special
from service.core import transforms as tr


def inverse_written_out(t: tr.Transform, z: np.ndarray) -> np.ndarray:
    """g^-1 from its definition; nan where the original value is unbounded."""
    with np.errstate(all="ignore"):
        if t.name == "identity":
            return z
        if t.name == "log":
            return np.exp(z) - (t.shift or 0.0)
        if t.name == "sqrt":
            return np.maximum(z, 0.0) ** 2
        if t.name == "square":
            return np.sqrt(np.maximum(z, 0.0))
        if t.name == "reciprocal":
            return np.where(z > 0, 1.0 / z, np.nan)
        if t.name == "power":
            p = t.exponent
            return np.maximum(z, 0.0) ** (1 / p) if p > 0 else np.where(z > 0, z ** (1 / p), np.nan)
        if t.name == "box_cox":
            lam = t.lam
            if lam > 0:  # base clipped at 0 (a value of 0 on the original scale)
                return np.where(lam * z + 1 > 0, special.inv_boxcox(z, lam), 0.0)
            return np.where(lam * z + 1 > 0, special.inv_boxcox(z, lam), np.nan)
        if t.name == "yeo_johnson":
            lam = t.lam
            pos = z >= 0
            bp = lam * z + 1 if lam != 0 else None
            up = np.exp(z) - 1 if lam == 0 else np.where(bp > 0, bp ** (1 / lam) - 1, np.nan)
            bn = 1 - (2 - lam) * z
            down = (
                1 - np.exp(-z) if lam == 2 else np.where(bn > 0, 1 - bn ** (1 / (2 - lam)), np.nan)
            )
            return np.where(pos, up, down)
    raise AssertionError(t.name)
