"""Invented demonstration data: repair costs of a regional water utility's mains.

Each row is one completed repair.  The cost was generated on the log scale:

    log(repair_cost) = 5.2 + 0.75·log(pipe_length_m) + 0.012·pipe_age_years
                       + soil effect (clay +0.25, loam 0, sand -0.15) + N(0, 0.25²)

so the scale a good selection should find is log(cost) on log(length), age
and soil.  The data are invented; no real utility is described.
"""

from __future__ import annotations

import numpy as np

SEED = 20261201
N_ROWS = 300


def demo_columns(n: int = N_ROWS, seed: int = SEED) -> dict[str, list]:
    rng = np.random.default_rng(seed)
    length = np.round(np.exp(rng.uniform(np.log(4.0), np.log(600.0), n)), 1)
    age = rng.integers(1, 81, n)
    soil = rng.choice(["clay", "loam", "sand"], size=n, p=[0.35, 0.4, 0.25])
    effect = np.select([soil == "clay", soil == "sand"], [0.25, -0.15], 0.0)
    log_cost = 5.2 + 0.75 * np.log(length) + 0.012 * age + effect + rng.normal(0.0, 0.25, n)
    cost = np.round(np.exp(log_cost), 2)
    return {
        "repair_cost": cost.tolist(),
        "pipe_length_m": length.tolist(),
        "pipe_age_years": [int(a) for a in age],
        "soil": soil.tolist(),
    }


def demo_request() -> dict:
    return {
        "data": {"columns": demo_columns()},
        "response": "repair_cost",
        "predictors": ["pipe_length_m", "pipe_age_years", "soil"],
        "validation": {"folds": 5, "repeats": 2, "seed": 0, "metric": "rmse"},
        "top": 3,
    }
