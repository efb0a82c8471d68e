"""Shared pieces of the hand-run benchmarks: invented data, BLAS pinning, timing helpers."""

from __future__ import annotations

import os
import time

import numpy as np


def pin_blas(threads: int = 1) -> None:
    """Pin every loaded BLAS (numpy's and scipy's) to ``threads``, as the service does."""
    import scipy.linalg
    import scipy.optimize  # noqa: F401  (loads scipy's BLAS so the limit reaches it)
    from threadpoolctl import threadpool_limits

    threadpool_limits(limits=threads)


def water_mains(n: int, p: int = 3, seed: int = 0) -> dict:
    """Invented repair costs of water mains: a log-scale relation in the first predictors."""
    rng = np.random.default_rng(seed)
    cols = {}
    eta = 4.0
    for j in range(p):
        x = rng.uniform(0.5, 20.0, n) * (1 + j % 3)
        cols[f"x{j}"] = x
        if j < 3:
            eta = eta + [0.5 * np.log(x), 0.03 * x, -0.2 * np.sqrt(x)][j]
    cols["repair_cost"] = np.exp(eta + rng.normal(0, 0.3, n))
    return cols


def machine() -> str:
    load = os.getloadavg()[0] if hasattr(os, "getloadavg") else float("nan")
    return f"{os.cpu_count()} cores, load average {load:.2f} at start (shared machine: timings are noisy)"


class Timer:
    def __enter__(self):
        self.t0, self.c0 = time.perf_counter(), time.process_time()
        return self

    def __exit__(self, *exc):
        self.wall = time.perf_counter() - self.t0
        self.cpu = time.process_time() - self.c0
