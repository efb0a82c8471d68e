"""Benchmark (run by hand): the service against a practitioner's loop on one grid.

Two loops, both over 3,000 rows of invented water-main repair costs, 5-fold CV
(scikit-learn ``KFold(5, shuffle=True, random_state=0)``, the service's folds for seed 0),
Duan smearing per test point as the mean of the inverse over the training residuals, pooled
RMSE on the original scale, and per-candidate diagnostics on the full fit:

- ``--loop headline`` (default): 4 response scales (identity, log, sqrt, reciprocal) x 5^3
  predictor scales (identity, log, sqrt, reciprocal, square) = 500 candidates; statsmodels
  OLS per fold; per candidate Breusch-Pagan, RESET, Jarque-Bera, Shapiro-Wilk,
  Durbin-Watson, VIFs and Cook's distance.  The service must find the same best CV error
  (relative difference <= 1e-9).
- ``--loop boxcox``: the same grid with Box-Cox (lambda estimated in every training fold by
  maximising the profile likelihood) in place of the reciprocal response; diagnostics
  Breusch-Pagan, Shapiro-Wilk, RESET, VIF, influence.

The service is called end to end over HTTP (TestClient).  Prints wall and CPU seconds of
both, the ratio (target >= 100x, stretch >= 200x), and the best CV error of each.

    python tests/benchmarks/naive_loop.py [--loop headline|boxcox] [--rows 3000]
                                          [--naive-candidates 500]

``--naive-candidates`` runs the loop on an evenly spaced subset and extrapolates its time
(stated in the output) when the full loop is too slow for the session.
"""

from __future__ import annotations

import argparse
import itertools
import math
import os
import sys

sys.path.insert(0, os.path.join(os.path.dirname(__file__), "..", ".."))

from tests.benchmarks._common import Timer, machine, pin_blas, water_mains

pin_blas(1)

import numpy as np
import statsmodels.api as sm
from scipy import optimize, stats
from sklearn.model_selection import KFold
from statsmodels.stats.diagnostic import het_breuschpagan, linear_reset
from statsmodels.stats.outliers_influence import OLSInfluence, variance_inflation_factor
from statsmodels.stats.stattools import durbin_watson, jarque_bera

RESPONSES = {
    "headline": ["identity", "log", "sqrt", "reciprocal"],
    "boxcox": ["identity", "log", "sqrt", "box_cox"],
}
PRED = ["identity", "log", "sqrt", "reciprocal", "square"]
FWD = {
    "identity": lambda v: v,
    "log": np.log,
    "sqrt": np.sqrt,
    "reciprocal": lambda v: 1 / v,
    "square": np.square,
}


def _bc(y, lam):
    return np.log(y) if abs(lam) < 1e-12 else (y**lam - 1) / lam


def _bc_inv(z, lam):
    if abs(lam) < 1e-12:
        return np.exp(z)
    base = 1 + lam * z
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(base > 0, base ** (1 / lam), 0.0 if lam > 0 else np.nan)


ZS = {"identity": lambda v: v, "log": np.log, "sqrt": np.sqrt, "reciprocal": lambda v: 1 / v}
INVERSES = {
    "identity": lambda v: v,
    "log": np.exp,
    "sqrt": lambda v: np.maximum(v, 0) ** 2,
    "reciprocal": lambda v: 1 / v,
}


def headline_candidate(X, y, resp, folds):
    """The loop a practitioner writes: OLS per fold, smearing per test point, then the
    usual diagnostics on the full fit."""
    fwd, inv = ZS[resp], INVERSES[resp]
    sq = 0.0
    for train, test in folds:
        res = sm.OLS(fwd(y[train]), X[train]).fit()
        e = res.resid
        pred = X[test] @ res.params
        mean = np.array([np.mean(inv(p + e)) for p in pred])  # Duan smearing per test point
        sq += float(np.sum((y[test] - mean) ** 2))
    cv = math.sqrt(sq / len(y))
    full = sm.OLS(fwd(y), X).fit()
    het_breuschpagan(full.resid, X)
    linear_reset(full, power=3, use_f=True)
    jarque_bera(full.resid)
    stats.shapiro(full.resid)
    durbin_watson(full.resid)
    [variance_inflation_factor(X, j) for j in range(1, X.shape[1])]
    _ = OLSInfluence(full).cooks_distance
    return cv


def naive_candidate(X, y, resp, folds):
    errs = []
    for train, test in folds:
        ytr = y[train]
        if resp == "box_cox":

            def nll(lam, ytr=ytr, train=train):
                res = sm.OLS(_bc(ytr, lam), X[train]).fit()
                return -(res.llf + (lam - 1) * np.sum(np.log(ytr)))

            lam = optimize.minimize_scalar(nll, bounds=(-3, 3), method="bounded").x
            z, inv = _bc(ytr, lam), (lambda v, lam=lam: _bc_inv(v, lam))
        else:
            z = {"identity": ytr, "log": np.log(ytr), "sqrt": np.sqrt(ytr)}[resp]
            inv = {"identity": lambda v: v, "log": np.exp, "sqrt": lambda v: np.maximum(v, 0) ** 2}[
                resp
            ]
        res = sm.OLS(z, X[train]).fit()
        e = res.resid
        pred = res.predict(X[test])
        mean = np.array([np.nanmean(inv(p + e)) for p in pred])  # smearing per test point
        errs.append(float(np.mean((y[test] - mean) ** 2)))
    cv = math.sqrt(sum(e * len(t) for e, (_, t) in zip(errs, folds, strict=True)) / len(y))
    # per-candidate diagnostics on all rows (response scale of the candidate)
    zfull = (
        _bc(y, 0.5)
        if resp == "box_cox"
        else {"identity": y, "log": np.log(y), "sqrt": np.sqrt(y)}[resp]
    )
    full = sm.OLS(zfull, X).fit()
    het_breuschpagan(full.resid, X)
    stats.shapiro(full.resid)
    linear_reset(full, power=3, use_f=True)
    [variance_inflation_factor(X, j) for j in range(1, X.shape[1])]
    full.get_influence().summary_frame()
    return cv


def main():
    ap = argparse.ArgumentParser()
    ap.add_argument("--loop", choices=sorted(RESPONSES), default="headline")
    ap.add_argument("--rows", type=int, default=3000)
    ap.add_argument("--naive-candidates", type=int, default=500)
    args = ap.parse_args()
    print(machine())
    cols = water_mains(args.rows, 3, seed=0)
    y = cols["repair_cost"]
    xs = [cols["x0"], cols["x1"], cols["x2"]]
    folds = list(KFold(5, shuffle=True, random_state=0).split(y))
    RESP = RESPONSES[args.loop]
    candidate = headline_candidate if args.loop == "headline" else naive_candidate
    grid = list(itertools.product(RESP, itertools.product(PRED, repeat=3)))
    step = max(1, len(grid) // args.naive_candidates)
    subset = grid[::step]
    best = (math.inf, None)
    with Timer() as tn:
        for resp, pts in subset:
            X = sm.add_constant(np.column_stack([FWD[p](x) for p, x in zip(pts, xs, strict=True)]))
            with np.errstate(all="ignore"):
                try:
                    cv = candidate(X, y, resp, folds)
                except (ValueError, np.linalg.LinAlgError):
                    continue
            if math.isfinite(cv) and cv < best[0]:
                best = (cv, (resp, pts))
    scale = len(grid) / len(subset)
    naive_wall = tn.wall * scale
    print(
        f"{args.loop} loop: {len(subset)} of {len(grid)} candidates in {tn.wall:.1f} s wall "
        f"({tn.cpu:.1f} s CPU); for all {len(grid)}: {naive_wall:.1f} s wall"
        + (" (extrapolated)" if scale > 1 else "")
    )
    print(f"naive best CV RMSE {best[0]:.6g} at {best[1]}")

    from fastapi.testclient import TestClient
    from service.app import app

    body = {
        "data": {"columns": {k: v.tolist() for k, v in cols.items()}},
        "response": "repair_cost",
        "predictors": ["x0", "x1", "x2"],
        "transforms": {"response": RESP, "predictors": PRED},
        "validation": {"folds": 5, "seed": 0},
    }
    with TestClient(app) as client:
        client.post(
            "/v1/selections",
            json={**body, "transforms": {"response": ["log"], "predictors": ["log"]}},
        )
        with Timer() as ts:
            r = client.post("/v1/selections", json=body)
    out = r.json()
    s = out["search"]
    print(
        f"service over HTTP: {s['candidates_scored']} scored, {s['candidates_failed']} failed "
        f"of {s['candidates_considered']} in {ts.wall:.2f} s wall ({ts.cpu:.2f} s CPU of this "
        f"process); search {s['elapsed_s']:.2f} s"
    )
    print(f"service best CV RMSE {s['best_cv']['value']:.6g}")
    print(
        f"ratio loop/service (wall): {naive_wall / ts.wall:.1f}x (target >= 100x, stretch >= 200x)"
    )
    spec = s["best_cv"]["specification"]
    key = (
        spec["response"]["transform"]["name"],
        tuple(p["transform"]["name"] for p in spec["predictors"]),
    )
    X = sm.add_constant(np.column_stack([FWD[p](x) for p, x in zip(key[1], xs, strict=True)]))
    with np.errstate(all="ignore"):
        naive_at_best = candidate(X, y, key[0], folds)
    print(
        f"the naive loop on the service's best candidate {key}: {naive_at_best:.6g}; "
        f"relative difference {s['best_cv']['value'] / naive_at_best - 1:+.2e} "
        f"(target {'1e-9' if args.loop == 'headline' else '1%'})"
    )
    if scale == 1:
        print(f"naive exhaustive optimum vs service: {s['best_cv']['value'] / best[0] - 1:+.2e}")
    else:
        print(
            f"service best vs the naive subset's best: {s['best_cv']['value'] / best[0] - 1:+.2e} "
            "(the subset need not hold the optimum)"
        )


if __name__ == "__main__":
    main()
