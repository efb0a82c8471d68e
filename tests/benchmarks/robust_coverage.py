"""Coverage of 95% slope intervals from classical, HC3 and Newey-West standard errors
(run by hand; a few seconds).

    python tests/benchmarks/robust_coverage.py [--reps 2000] [--n 50]

Heteroscedastic case: y = 1 + 2 x + e, x ~ uniform(1, 10), sd(e) = x^2 (variance growing
with x).  Serial case (n = 200): x and e both AR(1) with coefficient 0.7 in
time order.  Each replication counts whether the 95% interval (t with n - 2 df) holds the
true slope 2; the baseline is the classical interval in the same replications.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from scipy import stats
from service.core.fitting import hac_cov, hc3_cov, newey_west_lags, ols

NAMES = ["intercept", "x"]


def heteroscedastic(rng: np.random.Generator, n: int) -> tuple[np.ndarray, np.ndarray]:
    x = rng.uniform(1.0, 10.0, n)
    return x, 1.0 + 2.0 * x + rng.normal(0.0, 1.0, n) * x**2


def ar1(rng: np.random.Generator, n: int, phi: float = 0.7) -> np.ndarray:
    e = rng.normal(0.0, 1.0, n)
    out = np.empty(n)
    out[0] = e[0] / np.sqrt(1 - phi**2)
    for t in range(1, n):
        out[t] = phi * out[t - 1] + e[t]
    return out


def serial(rng: np.random.Generator, n: int) -> tuple[np.ndarray, np.ndarray]:
    x = ar1(rng, n)
    return x, 1.0 + 2.0 * x + ar1(rng, n)


def coverage(case: str, reps: int, n: int, seed: int = 0) -> dict[str, float]:
    rng = np.random.default_rng(seed)
    hits = {"classical": 0, "hc3": 0, "hac": 0}
    tq = stats.t.ppf(0.975, n - 2)
    lags = newey_west_lags(n)
    for _ in range(reps):
        x, y = (heteroscedastic if case == "heteroscedastic" else serial)(rng, n)
        X = np.column_stack([np.ones(n), x])
        fit = ols(X, y, NAMES, True)
        ses = {
            "classical": fit.se[1],
            "hc3": np.sqrt(hc3_cov(fit, X)[1, 1]),
            "hac": np.sqrt(hac_cov(fit, X, np.arange(n), lags)[1, 1]),
        }
        for k, s in ses.items():
            hits[k] += abs(fit.coef[1] - 2.0) <= tq * s
    return {k: v / reps for k, v in hits.items()}


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--reps", type=int, default=2000)
    ap.add_argument("--n", type=int, default=50, help="rows in the heteroscedastic case")
    a = ap.parse_args()
    print(f"95% slope intervals, {a.reps} replications each")
    print("| case | n | classical | HC3 | Newey-West |")
    print("|---|---|---|---|---|")
    for case, n in (("heteroscedastic", a.n), ("serial AR(1) 0.7", 200)):
        c = coverage("heteroscedastic" if case == "heteroscedastic" else "serial", a.reps, n)
        print(f"| {case} | {n} | {c['classical']:.3f} | {c['hc3']:.3f} | {c['hac']:.3f} |")


if __name__ == "__main__":
    main()
