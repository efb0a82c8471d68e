"""Coverage of 95% slope intervals from classical, HC3 and Newey-West standard errors, and
of 90% prediction intervals from normal theory and CV+ (run by hand; about a minute).

    python tests/benchmarks/robust_coverage.py [--reps 2000] [--n 50] [--datasets 20]
        [--skip-slopes] [--cases t3 growing boxcox powers] [--level 0.9]

Heteroscedastic case: y = 1 + 2 x + e, x ~ uniform(1, 10), sd(e) = x^2 (variance growing
with x).  Serial case (n = 200): x and e both AR(1) with coefficient 0.7 in
time order.  Each replication counts whether the 95% interval (t with n - 2 df) holds the
true slope 2; the baseline is the classical interval in the same replications.

Prediction intervals (the service's own path: /v1/diagnostics' core on one specification,
the issued model loaded back, /v1/predictions' core on fresh rows).  Per case, ``datasets``
training sets of ``n_train`` rows; each model predicts 5,000 fresh rows from the same
distribution and counts how many its 90% interval holds.  Cases, on the identity scale
unless named: t(3) errors (y = 10 + 2x + 3 t3); variance growing with the mean
(sd = 0.3 * mean); log-normal errors on an estimated Box-Cox scale (lambda estimated
inside every fold, so the folds' scales differ); t(3) errors around a power of x
(y = 10 + 2 x^1.7 + 3 t3, x ~ uniform(1, 10)) whose power the search estimates
(``/v1/selections``' core with the estimated power as the only predictor option, so the
power is estimated again inside every fold and every fold has its own design).  The
baseline is the normal-theory interval of the same models on the same rows.
"""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from scipy import stats
from service.api.artifact import load_model
from service.api.encode import to_jsonable
from service.api.render import contract
from service.core.data import prepare
from service.core.fitting import hac_cov, hc3_cov, newey_west_lags, ols
from service.core.predict import predict
from service.selection.diagnose import diagnose_specification
from service.selection.search import run_selection
from service.selection.search_setup import SearchOptions
from tests.typed import predictors, responses, sent

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


PI_CASES = ("t3", "growing", "boxcox", "powers")
PI_LABELS = {
    "t3": "t(3) errors, identity scale",
    "growing": "sd growing with the mean (0.3 x mean), identity scale",
    "boxcox": "log-normal errors, Box-Cox scale estimated per fold",
    "powers": "t(3) errors, power of x estimated per fold",
}


def pi_data(case: str, rng: np.random.Generator, n: int) -> tuple[np.ndarray, np.ndarray]:
    if case == "powers":
        x = rng.uniform(1.0, 10.0, n)
        return x, 10.0 + 2.0 * x**1.7 + 3.0 * rng.standard_t(3, n)
    x = rng.uniform(0.0, 10.0, n)
    mean = 10.0 + 2.0 * x
    if case == "t3":
        return x, mean + 3.0 * rng.standard_t(3, n)
    if case == "growing":
        return x, mean + 0.3 * mean * rng.normal(0.0, 1.0, n)
    return x, np.exp(1.0 + 0.15 * x + 0.4 * rng.normal(0.0, 1.0, n))


def pi_coverage(
    case: str, datasets: int, n_train: int, fresh: int = 5000, level: float = 0.9, seed: int = 0
) -> dict[str, list[float]]:
    """Per training set: the share of ``fresh`` new rows inside each method's interval
    (``normal``, ``cv_plus``) and the same among fresh rows with x above 9, the tenth with
    the largest means (``normal_top``, ``cv_plus_top``)."""
    rng = np.random.default_rng(seed)
    resp = {"name": "box_cox"} if case == "boxcox" else {"name": "identity"}
    spec = {
        "response": {"column": "y", "transform": resp},
        "predictors": [{"column": "x", "transform": {"name": "identity"}}],
    }
    out: dict[str, list[float]] = {"normal": [], "cv_plus": [], "normal_top": [], "cv_plus_top": []}
    for _ in range(datasets):
        x, y = pi_data(case, rng, n_train)
        prep = prepare({"columns": {"x": x.tolist(), "y": y.tolist()}}, "y", ["x"])
        if case == "powers":
            opts = SearchOptions(responses(["identity"]), predictors([{"name": "power"}]), top=1)
            entry = to_jsonable(run_selection(prep, opts, "bench"))["ranking"][0]
            assert entry["model"]["cv_plus"]["fold_powers"]["columns"] == ["x"]
        else:
            entry, _ = diagnose_specification(
                prep, sent(spec), SearchOptions(), "bench", max_points=10
            )
        model = load_model(to_jsonable(entry["model"] if isinstance(entry, dict) else entry.model))
        x0, y0 = pi_data(case, rng, fresh)
        for method in ("normal", "cv_plus"):
            p = contract(predict(model, {"columns": {"x": x0.tolist()}}, level, method))[
                "predictions"
            ]
            lo = np.array([r["lower"] if r["lower"] is not None else -np.inf for r in p])
            hi = np.array([r["upper"] if r["upper"] is not None else np.inf for r in p])
            inside = (lo <= y0) & (y0 <= hi)
            out[method].append(float(np.mean(inside)))
            out[method + "_top"].append(float(np.mean(inside[x0 > 9.0])))
    return out


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--reps", type=int, default=2000)
    ap.add_argument("--n", type=int, default=50, help="rows in the heteroscedastic case")
    ap.add_argument("--datasets", type=int, default=20, help="training sets per interval case")
    ap.add_argument("--n-train", type=int, default=300, help="rows of each training set")
    ap.add_argument("--level", type=float, default=0.9, help="prediction interval level")
    ap.add_argument("--skip-slopes", action="store_true", help="prediction intervals only")
    ap.add_argument(
        "--cases", nargs="+", choices=PI_CASES, default=list(PI_CASES), help="interval cases"
    )
    a = ap.parse_args()
    if not a.skip_slopes:
        print(f"95% slope intervals, {a.reps} replications each")
        print("| case | n | classical | HC3 | Newey-West |")
        print("|---|---|---|---|---|")
        for case, n in (("heteroscedastic", a.n), ("serial AR(1) 0.7", 200)):
            c = coverage("heteroscedastic" if case == "heteroscedastic" else "serial", a.reps, n)
            print(f"| {case} | {n} | {c['classical']:.3f} | {c['hc3']:.3f} | {c['hac']:.3f} |")
        print()
    print(
        f"{a.level:.0%} prediction intervals: {a.datasets} training sets of {a.n_train} rows, "
        "5,000 fresh rows each; mean coverage (lowest to highest training set)"
    )
    print("| case | CV+ | normal theory | CV+, x > 9 | normal, x > 9 |")
    print("|---|---|---|---|---|")
    for case in a.cases:
        c2 = pi_coverage(case, a.datasets, a.n_train, level=a.level)
        cells = [f"{np.mean(c2[k]):.3f} ({min(c2[k]):.3f} to {max(c2[k]):.3f})" for k in c2]
        tops = [f"{np.mean(c2[k]):.3f}" for k in ("cv_plus_top", "normal_top")]
        print(f"| {PI_LABELS[case]} | {cells[1]} | {cells[0]} | {tops[0]} | {tops[1]} |")


if __name__ == "__main__":
    main()
