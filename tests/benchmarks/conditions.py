"""Condition tests of one entry: our own least squares against the statsmodels route.

Run by hand: ``python tests/benchmarks/conditions.py [--rows 2000 20000 200000]``.

For each size, one design (intercept, four numeric columns, one 0/1 column) is assessed by
``core.conditions.assess_conditions`` (one SVD, added-variable and auxiliary solves) and by
the straightforward statsmodels route a practitioner writes: ``OLS().fit()``,
``get_influence()``, RESET by ``compare_f_test`` of a refit with the powers, ``linear_rainbow``,
``het_breuschpagan``, ``het_white``, ``acorr_breusch_godfrey`` and ``acorr_ljungbox``.  Both
are timed in the same run (CPU seconds of this process, so other jobs on a shared machine
distort less), and the ratio is printed with the largest relative difference between the
statistics both compute.
"""

from __future__ import annotations

import argparse
import time
import warnings

import numpy as np
import statsmodels.api as sm
from _common import machine, pin_blas
from service.core import _condition_tests as ct
from service.core.conditions import ConditionInputs, ConditionReport, assess_conditions
from service.core.spec import TermInfo
from statsmodels.stats import diagnostic as smd


def design(n: int, seed: int = 0) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    X = np.column_stack([np.ones(n), rng.normal(size=(n, 4)), rng.normal(size=n) > 0.3])
    z = X @ [1.0, 0.5, -0.3, 0.2, 0.1, 0.4] + rng.normal(size=n) * (1 + 0.3 * np.abs(X[:, 1]))
    return z, X.astype(float)


def ours(z: np.ndarray, X: np.ndarray) -> dict:
    terms = tuple(
        TermInfo(f"x{j}", "numeric", (j,), X[:, j], f"x{j}") for j in range(1, X.shape[1])
    )
    inp = ConditionInputs(z, X, True, terms, np.arange(z.size) + 1, np.arange(z.size))
    return assess_conditions(inp)


def statsmodels_route(z: np.ndarray, X: np.ndarray) -> dict:
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = sm.OLS(z, X).fit()
        infl = res.get_influence()
        _ = infl.cooks_distance[0], infl.resid_studentized_external
        f = res.fittedvalues - res.fittedvalues.mean()
        f = f / np.sqrt(np.mean(f**2))
        big = sm.OLS(z, np.column_stack([X, f**2, f**3])).fit()
        reset = big.compare_f_test(res)[0]
        rainbow = smd.linear_rainbow(res, frac=0.5, use_distance=True)[0]
        fit = ct.fit_model(z, X, True)  # the same standardised regressors as ours
        Z = ct.standardized_regressors(fit)
        bp = smd.het_breuschpagan(res.resid, Z, robust=True)[0]
        white = smd.het_white(res.resid, Z)[0] if 21 * z.size <= ct.WHITE_MAX_CELLS else None
        lags = ct.breusch_godfrey_lags(z.size)
        bg = smd.acorr_breusch_godfrey(res, nlags=lags, result_object=True).lm
        lb = smd.acorr_ljungbox(res.resid, lags=min(10, z.size // 5))["lb_stat"].iloc[-1]
    return {
        "RESET": reset,
        "Rainbow": rainbow,
        "Breusch-Pagan": bp,
        "White": white,
        "Breusch-Godfrey": bg,
        "Ljung-Box": lb,
    }


def statistic(out: ConditionReport, prefix: str) -> float | None:
    for _, cond in out.named():
        for t in cond.tests:
            if t.name.startswith(prefix) or prefix in t.name:
                return t.statistic
    return None


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, nargs="+", default=[2000, 20000, 200000])
    args = ap.parse_args()
    pin_blas(1)
    print(machine())
    print(f"{'rows':>8} {'ours s':>9} {'statsmodels s':>14} {'ratio':>7} {'max rel diff':>13}")
    for n in args.rows:
        z, X = design(n)
        t = time.process_time()
        mine = ours(z, X)
        t_ours = time.process_time() - t
        t = time.process_time()
        ref = statsmodels_route(z, X)
        t_ref = time.process_time() - t
        diffs = []
        for name, want in ref.items():
            got = statistic(mine, name)
            if want is not None and got is not None:
                diffs.append(abs(got - want) / abs(want))
        print(f"{n:>8} {t_ours:>9.3f} {t_ref:>14.3f} {t_ref / t_ours:>6.1f}x {max(diffs):>13.1e}")


if __name__ == "__main__":
    main()
