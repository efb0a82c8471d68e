"""Box-Tidwell (1962) predictor powers: recovery, agreement with a brute-force profile and with
scipy's nonlinear least squares, the fallback, and re-estimation inside every training fold.

Tolerances (fixed in advance): recovered power within 0.05 and within 4 standard errors of
the truth (n = 400, noise sd 0.1); brute-force argmin within one grid step (1e-3);
power and standard error against scipy.optimize.curve_fit abs 1e-5 / rel 1e-3.
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy.optimize import curve_fit, minimize_scalar
from service.core import boxtidwell as bt
from service.core.data import prepare
from service.core.errors import CandidateFailure
from service.core.folds import make_plan
from service.selection.search import select
from service.selection.search_setup import SearchOptions

from tests.typed import predictors, responses


def _data(a_true: float, seed: int, n: int = 400):
    rng = np.random.default_rng(seed)
    x = rng.uniform(1.0, 10.0, n)
    w = rng.normal(0.0, 1.0, n)
    xa = np.log(x) if a_true == 0 else x**a_true
    z = 1.0 + 2.0 * xa + 0.5 * w + rng.normal(0.0, 0.1, n)
    return x, w, z


def _rss(z, Xf, x, a):
    col = np.log(x) if abs(a) < 1e-12 else (x**a - 1.0) / a
    A = np.column_stack([Xf, col])
    coef, *_ = np.linalg.lstsq(A, z, rcond=None)
    r = z - A @ coef
    return float(r @ r)


@pytest.mark.parametrize("a_true", [-1.0, -0.5, 0.0, 0.5, 2.0])
def test_recovers_a_known_power(a_true):
    x, w, z = _data(a_true, seed=int(10 * (a_true + 3)))
    Xf = np.column_stack([np.ones(x.size), w])
    fit = bt.estimate_powers(z, Xf, x)
    # source: simulation with known truth z = 1 + 2 x^a + 0.5 w + N(0, 0.1^2)
    assert fit.converged and fit.method == "box_tidwell"
    assert abs(fit.powers[0] - a_true) < 0.05
    assert abs(fit.powers[0] - a_true) < 4 * fit.std_errors[0]


@pytest.mark.parametrize("a_true", [-0.7, 0.3, 1.4])
def test_agrees_with_brute_force_profile(a_true):
    x, w, z = _data(a_true, seed=7)
    Xf = np.column_stack([np.ones(x.size), w])
    fit = bt.estimate_powers(z, Xf, x)
    grid = np.round(np.arange(-3.0, 3.0 + 1e-9, 1e-3), 6)
    rss = np.array([_rss(z, Xf, x, a) for a in grid])
    # source: brute-force profile of the residual sum of squares over the exponent, step 1e-3
    assert fit.powers[0] == pytest.approx(grid[int(np.argmin(rss))], abs=1e-3)
    assert fit.rss <= rss.min() * (1 + 1e-12)


def test_power_and_standard_error_match_nonlinear_least_squares():
    x, w, z = _data(0.37, seed=3)
    Xf = np.column_stack([np.ones(x.size), w])
    fit = bt.estimate_powers(z, Xf, x)

    def model(X, b0, b1, bw, a):
        xx, ww = X
        return b0 + b1 * (xx**a - 1.0) / a + bw * ww

    p, cov = curve_fit(model, (x, w), z, p0=[1.0, 2.0, 0.5, 0.5], xtol=1e-12, ftol=1e-12)
    # source: scipy.optimize.curve_fit (Levenberg-Marquardt) on the same model
    assert fit.powers[0] == pytest.approx(p[3], abs=1e-5)
    assert fit.std_errors[0] == pytest.approx(np.sqrt(cov[3, 3]), rel=1e-3)


def test_two_powers_jointly():
    rng = np.random.default_rng(11)
    n = 500
    x1, x2 = rng.uniform(1, 8, n), rng.uniform(0.5, 4, n)
    z = 3.0 + 1.5 * np.sqrt(x1) - 2.0 / x2 + rng.normal(0, 0.05, n)
    fit = bt.estimate_powers(z, np.ones((n, 1)), np.column_stack([x1, x2]))
    # source: simulation with known truth (powers 0.5 and -1)
    np.testing.assert_allclose(fit.powers, [0.5, -1.0], atol=0.06)


def test_no_signal_falls_back_cleanly():
    rng = np.random.default_rng(5)
    n = 200
    x = rng.uniform(1, 2, n)  # narrow range, and z does not depend on x
    z = rng.normal(0, 1, n)
    fit = bt.estimate_powers(z, np.ones((n, 1)), x)
    assert bt.POWER_BOUNDS[0] <= fit.powers[0] <= bt.POWER_BOUNDS[1]
    grid = np.linspace(-3, 3, 61)
    best = min(_rss(z, np.ones((n, 1)), x, a) for a in grid)
    # source: brute-force profile; whichever path ran, the power is no worse than the grid's best
    assert fit.rss <= best * (1 + 1e-9)
    summary = fit.summary(0)
    assert summary.method in ("box_tidwell", "profile")


def test_summary_reports_interval_and_ladder():
    x, w, z = _data(0.5, seed=2)
    fit = bt.estimate_powers(z, np.column_stack([np.ones(x.size), w]), x)
    s = fit.summary(0)
    assert s.ci_low < s.power < s.ci_high
    # source: Wald interval a +- 1.96 se (normal quantile, common practice)
    assert s.ci_high - s.power == pytest.approx(1.959963984540054 * s.std_error, rel=1e-12)
    assert s.ladder == 0.5  # the nearest ladder power inside the interval
    assert s.per_fold is None and s.source.endswith("Box & Tidwell (1962)")


def test_power_is_estimated_again_in_every_training_fold():
    rng = np.random.default_rng(8)
    n = 240
    x = rng.uniform(1, 9, n)
    y = 2.0 + 3.0 * x**-0.3 + rng.normal(0, 0.05, n)
    prep = prepare({"columns": {"y": y.tolist(), "x": x.tolist()}}, "y", ["x"])
    opts = SearchOptions(
        response_transforms=responses(["identity"]),
        predictor_transforms=predictors(["power"]),
        folds=4,
    )
    out = select(prep, opts, "t")
    est = [s for s in out.scored if s.cv.fold_powers]
    assert est, "the estimated power was not scored"
    s = est[0]
    plan = make_plan(n, 4, 1, 0)
    for k, a in enumerate(s.cv.fold_powers):
        rows = plan.assignments[0] != k
        fold = bt.estimate_powers(y[rows], np.ones((int(rows.sum()), 1)), x[rows])
        # source: Box-Tidwell on the training rows alone (no held-out row used)
        assert a[0] == pytest.approx(fold.powers[0], abs=1e-6)
    full = bt.estimate_powers(y, np.ones((n, 1)), x).powers[0]
    assert s.spec.predictors[0].transform.exponent == pytest.approx(full, abs=1e-9)
    assert len({round(a[0], 8) for a in s.cv.fold_powers}) > 1
    rep = out.body.search.predictor_powers["x"][0]
    assert rep.estimate.power == pytest.approx(-0.3, abs=0.05)  # source: simulation truth


def test_screening_powers_stop_at_the_deadline():
    import time

    from service.core import transforms as tr
    from service.selection import candidates as cand
    from service.selection.deadline import Deadline

    rng = np.random.default_rng(9)
    n = 300
    cols = {f"x{j}": rng.uniform(1, 9, n) for j in range(3)}
    y = 2.0 + sum(np.sqrt(v) for v in cols.values()) + rng.normal(0, 0.1, n)
    prep = prepare(
        {"columns": {"y": y.tolist(), **{k: v.tolist() for k, v in cols.items()}}}, "y", list(cols)
    )
    preds = cand.predictor_candidates(prep, None)
    resp = [tr.Transform("identity"), tr.Transform("log")]
    info, powers = cand.screening_powers(prep, preds, resp, True, 0)
    assert len(powers) == 6  # 2 response scales x 3 predictors, without a deadline
    gone = Deadline(time.monotonic() - 1.0, 60.0)
    info, powers = cand.screening_powers(prep, preds, resp, True, 0, deadline=gone)
    assert info == {} and powers == {}  # past the deadline nothing more is estimated


def test_started_profile_fallback_finds_the_brute_force_argmin_near_the_start(monkeypatch):
    x, w, z = _data(0.3, seed=21)
    Xf = np.column_stack([np.ones(x.size), w])
    monkeypatch.setattr(bt, "MAX_ITER", 0)  # force the fallback
    fit = bt.estimate_powers(z, Xf, x, start=np.array([0.1]), with_se=False)
    assert fit.method == "profile" and fit.std_errors is None
    grid = np.round(np.arange(-0.4, 0.6 + 1e-9, 1e-3), 6)  # start +- LOCAL_HALF_WIDTH
    rss = np.array([_rss(z, Xf, x, a) for a in grid])
    # source: brute-force profile of the residual sum of squares over the exponent, step 1e-3
    assert fit.powers[0] == pytest.approx(grid[int(np.argmin(rss))], abs=1e-3)
    assert fit.rss <= rss.min() * (1 + 1e-12)


# ------------------------------------------------------------ every training fold at once
def _fold_rows(n: int, folds: int, seed: int) -> list[np.ndarray]:
    a = make_plan(n, folds, 1, seed).assignments[0]
    return [np.flatnonzero(a != k) for k in range(folds)]


def _lstsq_rss(z, Xf, x, a):
    """RSS of z on [Xf, (x^a - 1)/a] by statsmodels OLS (QR), the reference fit."""
    import statsmodels.api as sm

    col = np.log(x) if abs(a) < 1e-12 else (x**a - 1.0) / a
    return float(sm.OLS(z, np.column_stack([Xf, col])).fit(method="qr").ssr)


@pytest.mark.parametrize("a_true", [-0.6, 0.0, 0.8])
def test_fold_powers_equal_the_rss_minimum_on_each_training_fold(a_true):
    x, w, z = _data(a_true, seed=31, n=300)
    Xf = np.column_stack([np.ones(x.size), w])
    train = _fold_rows(x.size, 5, 2)
    start = bt.estimate_powers(z, Xf, x).powers
    fits = bt.estimate_fold_powers(z, Xf, x, train, start)
    for f, rows in enumerate(train):
        ref = minimize_scalar(
            lambda a, rows=rows: _lstsq_rss(z[rows], Xf[rows], x[rows], a),
            bounds=(start[0] - 0.5, start[0] + 0.5),
            method="bounded",
            options={"xatol": 1e-10},
        )
        # source: statsmodels OLS residual sum of squares on the fold's training rows,
        # minimised over the power by scipy.optimize.minimize_scalar (bounded Brent);
        # tolerance abs 1e-5 (the iteration stops at steps below 1e-6)
        assert fits[f].method == "box_tidwell" and fits[f].converged
        assert fits[f].powers[0] == pytest.approx(ref.x, abs=1e-5)
        assert fits[f].rss == pytest.approx(ref.fun, rel=1e-9)


def test_fold_powers_from_downdated_grams_equal_the_fold_by_fold_estimates():
    rng = np.random.default_rng(12)
    n = 400
    x1, x2 = rng.uniform(1, 8, n), rng.uniform(0.5, 4, n)
    w = rng.normal(size=n)
    z = 3.0 + 1.5 * np.sqrt(x1) - 2.0 / x2 + 0.3 * w + rng.normal(0, 0.05, n)
    Xf = np.column_stack([np.ones(n), w])
    x = np.column_stack([x1, x2])
    train = _fold_rows(n, 5, 0) + _fold_rows(n, 5, 1)  # two repeats in one batch
    test = [np.setdiff1d(np.arange(n), rows) for rows in train]
    # fixed cross-products as the column bank gives them: all rows minus the held-out rows
    grams = np.stack([Xf.T @ Xf - Xf[t].T @ Xf[t] for t in test])
    crosses = np.stack([Xf.T @ z - Xf[t].T @ z[t] for t in test])
    start = bt.estimate_powers(z, Xf, x).powers
    fits = bt.estimate_fold_powers(z, Xf, x, train, start, grams=grams, crosses=crosses)
    for f, rows in enumerate(train):
        one = bt.estimate_powers(z[rows], Xf[rows], x[rows], start=start, with_se=False)
        # source: the fold-by-fold estimate (each fold's cross-products from its own rows);
        # both stop within the 1e-6 step tolerance of the same minimum
        np.testing.assert_allclose(fits[f].powers, one.powers, atol=1e-5)
        assert fits[f].rss == pytest.approx(one.rss, rel=1e-9)
    # source: simulation truth (powers 0.5 and -1)
    np.testing.assert_allclose(np.mean([f.powers for f in fits], axis=0), [0.5, -1.0], atol=0.06)


def test_ill_conditioned_fold_is_solved_by_qr_and_matches_the_reference(monkeypatch):
    x, w, z = _data(0.4, seed=41, n=300)
    rng = np.random.default_rng(3)
    # two fixed columns that differ by 1e-6 relative: the scaled Gram matrix's condition
    # number (~1e12) is far above the 1e7 limit, so every fold takes the pivoted-QR path
    Xf = np.column_stack([np.ones(x.size), w, w + 1e-6 * rng.normal(size=x.size)])
    train = _fold_rows(x.size, 4, 5)
    calls = []
    real = bt.qr_solve

    def spy(*a, **k):
        calls.append(1)
        return real(*a, **k)

    monkeypatch.setattr(bt, "qr_solve", spy)
    start = np.array([0.4])
    fits = bt.estimate_fold_powers(z, Xf, x, train, start)
    assert calls, "the QR fallback was not taken"
    for f, rows in enumerate(train):
        ref = minimize_scalar(
            lambda a, rows=rows: _lstsq_rss(z[rows], Xf[rows], x[rows], a),
            bounds=(-0.1, 0.9),
            method="bounded",
            options={"xatol": 1e-10},
        )
        # source: statsmodels OLS (QR) RSS minimised by scipy.optimize.minimize_scalar
        assert fits[f].powers[0] == pytest.approx(ref.x, abs=1e-5)
        assert fits[f].rss == pytest.approx(ref.fun, rel=1e-7)


def test_fold_that_does_not_converge_takes_the_started_profile_search(monkeypatch):
    x, w, z = _data(0.3, seed=21, n=300)
    Xf = np.column_stack([np.ones(x.size), w])
    train = _fold_rows(x.size, 3, 4)
    monkeypatch.setattr(bt, "MAX_ITER", 0)  # force the fallback
    start = np.array([0.1])
    fits = bt.estimate_fold_powers(z, Xf, x, train, start)
    for f, rows in enumerate(train):
        one = bt.estimate_powers(z[rows], Xf[rows], x[rows], start=start, with_se=False)
        assert fits[f].method == one.method == "profile"
        # source: the fold-by-fold path (same profile search on the same rows): equal
        assert fits[f].powers[0] == one.powers[0]
        grid = np.round(np.arange(-0.4, 0.6 + 1e-9, 1e-3), 6)
        rss = np.array([_rss(z[rows], Xf[rows], x[rows], a) for a in grid])
        # source: brute-force profile of the residual sum of squares, step 1e-3
        assert fits[f].powers[0] == pytest.approx(grid[int(np.argmin(rss))], abs=1e-3)


def test_fold_failures_name_the_fold(monkeypatch):
    rng = np.random.default_rng(6)
    n = 120
    x = rng.uniform(1, 5, (n, 3))
    z = rng.normal(size=n)
    train = _fold_rows(n, 4, 0)
    monkeypatch.setattr(bt, "MAX_ITER", 0)
    with pytest.raises(CandidateFailure, match=r"^fold 3: the Box-Tidwell iteration for 3"):
        bt.estimate_fold_powers(z, np.ones((n, 1)), x, train, np.ones(3), labels=[3, 4, 1, 2])
    short = [np.arange(4), *train[1:]]
    with pytest.raises(CandidateFailure, match=r"^fold 1: 4 rows are too few"):
        bt.estimate_fold_powers(z, np.ones((n, 1)), x[:, 0], short, np.ones(1))


def test_fold_powers_without_an_intercept_use_plain_powers_as_the_one_fold_path():
    rng = np.random.default_rng(17)
    n = 250
    x = rng.uniform(1, 6, n)
    w = rng.normal(size=n)
    z = 2.0 * x**0.7 + 0.4 * w + rng.normal(0, 0.05, n)
    Xf = w[:, None]  # no intercept: the column is x^a itself
    train = _fold_rows(n, 5, 3)
    start = bt.estimate_powers(z, Xf, x, boxcox_form=False).powers
    fits = bt.estimate_fold_powers(z, Xf, x, train, start, boxcox_form=False)
    for f, rows in enumerate(train):
        one = bt.estimate_powers(
            z[rows], Xf[rows], x[rows], start=start, boxcox_form=False, with_se=False
        )
        # source: the fold-by-fold estimate on the fold's rows (steps below 1e-6 at the end)
        assert fits[f].powers[0] == pytest.approx(one.powers[0], abs=1e-5)
        # source: simulation truth z = 2 x^0.7 + 0.4 w + N(0, 0.05^2)
        assert fits[f].powers[0] == pytest.approx(0.7, abs=0.05)


def _candidate(kind: str, rng, n: int, k: int):
    """One candidate's (z, X_f, x): random, collinear (scaled Gram condition ~1e12, the QR
    path) or badly scaled fixed columns (1e6 and 1e-6 beside a calendar year)."""
    x = rng.uniform(0.5, 12.0, (n, k))
    w = rng.normal(size=n)
    if kind == "random":
        Xf = np.column_stack([np.ones(n), w])
    elif kind == "collinear":
        Xf = np.column_stack([np.ones(n), w, w + 1e-6 * rng.normal(size=n)])
    else:
        Xf = np.column_stack([np.ones(n), 1e6 * w, 1990.0 + rng.uniform(0, 30, n)])
    z = 1.0 + 0.8 * np.log(x[:, 0]) + 0.3 * w + rng.normal(0, 0.2, n)
    if k == 2:
        z += 0.5 * np.sqrt(x[:, 1])
    return z, Xf, x


@pytest.mark.parametrize("kind", ["random", "collinear", "badly_scaled"])
def test_many_candidates_stepped_together_equal_one_call_per_candidate(kind):
    rng = np.random.default_rng(len(kind))
    n = 240
    train = _fold_rows(n, 5, 0) + _fold_rows(n, 5, 1)
    problems = []
    for c in range(6):
        z, Xf, x = _candidate(kind, rng, n, 1 + c % 2)
        if c == 4:  # an overlapping set of fits: a response per fold
            z = np.stack([z + 0.01 * f for f in range(len(train))])
        start = bt.estimate_powers(z if z.ndim == 1 else z[0], Xf, x).powers
        problems.append(bt.FoldPowerProblem(z, Xf, x, train, start))
    got = bt.estimate_many_fold_powers(problems)
    for pr, fits in zip(problems, got, strict=True):
        one = bt.estimate_fold_powers(pr.z, pr.Xf, pr.x, pr.train, pr.start)
        for f, ref in zip(fits, one, strict=True):
            # source: the one-candidate path (estimate_fold_powers per candidate): the same
            # steps, halvings and stops, so the same iterations and powers to 1e-9
            assert (f.iterations, f.method) == (ref.iterations, ref.method)
            np.testing.assert_allclose(f.powers, ref.powers, rtol=1e-9, atol=1e-12)
            assert f.rss == pytest.approx(ref.rss, rel=1e-9)
    # one fold checked against a reference outside the package for the one-power candidates
    pr, fits = problems[0], got[0]
    rows = train[3]
    ref = minimize_scalar(
        lambda a: _lstsq_rss(pr.z[rows], pr.Xf[rows], pr.x[rows, 0], a),
        bounds=(pr.start[0] - 0.5, pr.start[0] + 0.5),
        method="bounded",
        options={"xatol": 1e-10},
    )
    # source: statsmodels OLS (QR) RSS minimised by scipy.optimize.minimize_scalar;
    # abs 1e-5 (the iteration stops at steps below 1e-6)
    assert fits[3].powers[0] == pytest.approx(ref.x, abs=1e-5)


def test_a_failing_candidate_in_a_stack_fails_alone_with_the_one_candidate_reason(monkeypatch):
    rng = np.random.default_rng(8)
    n = 120
    train = _fold_rows(n, 4, 0)
    good = _candidate("random", rng, n, 1)
    three = (rng.normal(size=n), np.ones((n, 1)), rng.uniform(1, 5, (n, 3)))
    negative = (good[0], good[1], -good[2])
    problems = [
        bt.FoldPowerProblem(good[0], good[1], good[2], train, np.array([0.2])),
        bt.FoldPowerProblem(*three, train, np.ones(3), labels=[3, 4, 1, 2]),
        bt.FoldPowerProblem(*negative, train, np.array([0.2])),
    ]
    monkeypatch.setattr(bt, "MAX_ITER", 0)  # no steps: three powers cannot be profiled
    got = bt.estimate_many_fold_powers(problems)
    for pr, res in zip(problems, got, strict=True):
        try:
            one = bt.estimate_fold_powers(pr.z, pr.Xf, pr.x, pr.train, pr.start, labels=pr.labels)
        except CandidateFailure as exc:
            # source: the one-candidate path's failure, word for word
            assert isinstance(res, CandidateFailure) and res.reason == exc.reason
            continue
        assert not isinstance(res, CandidateFailure)
        assert [f.powers[0] for f in res] == [f.powers[0] for f in one]
    assert isinstance(got[1], CandidateFailure) and got[1].reason.startswith("fold 3: ")


def test_stacks_are_cut_at_the_cell_limit_without_changing_a_power(monkeypatch):
    rng = np.random.default_rng(4)
    n = 150
    train = _fold_rows(n, 5, 2)
    problems = []
    for _ in range(5):
        z, Xf, x = _candidate("random", rng, n, 1)
        problems.append(bt.FoldPowerProblem(z, Xf, x, train, bt.estimate_powers(z, Xf, x).powers))
    whole = bt.estimate_many_fold_powers(problems)
    monkeypatch.setattr(bt, "STACK_CELLS", 2 * len(train) * n)  # two candidates a stack
    cut = bt.estimate_many_fold_powers(problems)
    for a, b in zip(whole, cut, strict=True):
        # source: the same problems stepped in one stack (the uncut run above)
        assert [f.powers[0] for f in a] == pytest.approx([f.powers[0] for f in b], rel=1e-12)


@pytest.mark.parametrize("kind", ["random", "collinear", "badly_scaled"])
def test_all_rows_powers_of_many_candidates_equal_one_call_each(kind):
    rng = np.random.default_rng(len(kind) + 7)
    n = 220
    problems = [_candidate(kind, rng, n, 1 + c % 2) for c in range(6)]
    problems.append((problems[0][0], problems[0][1], -problems[0][2]))  # x <= 0: fails
    got = bt.estimate_many_powers(problems)
    for (z, Xf, x), fit in zip(problems, got, strict=True):
        try:
            one = bt.estimate_powers(z, Xf, x)
        except CandidateFailure as exc:
            # source: the one-candidate path's failure, word for word
            assert isinstance(fit, CandidateFailure) and fit.reason == exc.reason
            continue
        assert not isinstance(fit, CandidateFailure)
        # source: the one-candidate path (estimate_powers): the same steps and stops; the fit
        # on [X_f, W] comes from the leading block of a larger factor, so the RSS
        # comparisons see rounding-level differences only
        assert (fit.iterations, fit.method) == (one.iterations, one.method)
        np.testing.assert_allclose(fit.powers, one.powers, rtol=1e-9, atol=1e-11)
        np.testing.assert_allclose(fit.std_errors, one.std_errors, rtol=1e-7)
    z, Xf, x = problems[0]
    fit = got[0]

    if kind == "random":

        def f(_i, b0, b1, b2, a):
            col = np.log(x[:, 0]) if abs(a) < 1e-12 else (x[:, 0] ** a - 1.0) / a
            return b0 * Xf[:, 0] + b1 * Xf[:, 1] + b2 * col

        p0 = [0.0, 0.0, 1.0, float(fit.powers[0])]
        popt, pcov = curve_fit(f, np.arange(n), z, p0=p0)
        # source: scipy.optimize.curve_fit (nonlinear least squares); abs 1e-5 / rel 1e-3
        assert fit.powers[0] == pytest.approx(popt[3], abs=1e-5)
        assert fit.std_errors[0] == pytest.approx(np.sqrt(pcov[3, 3]), rel=1e-3)


def _ols_std_errors(z, Xf, x, a):
    """The standard errors of the powers ``a`` from statsmodels OLS fits of the two designs
    at the estimate: se_j = bse(dw_j/da) / |b_j|, b_j from the fit on [X_f, W]."""
    W, D = bt.power_columns(np.log(x), a, True)
    b = sm.OLS(z, np.column_stack([Xf, W])).fit().params[Xf.shape[1] :]
    bse = sm.OLS(z, np.column_stack([Xf, W, D])).fit().bse[Xf.shape[1] + W.shape[1] :]
    return bse / np.abs(b)


@pytest.mark.parametrize("kind", ["random", "collinear", "badly_scaled"])
def test_stacked_standard_errors_equal_statsmodels_ols(kind, monkeypatch):
    rng = np.random.default_rng(len(kind) + 21)
    n = 200
    problems = [_candidate(kind, rng, n, 1 + c % 2) for c in range(5)]
    exact = []
    real = bt._std_errors_exact
    monkeypatch.setattr(bt, "_std_errors_exact", lambda *a: exact.append(1) or real(*a))
    got = bt.estimate_many_powers(problems)
    for (z, Xf, x), fit in zip(problems, got, strict=True):
        assert not isinstance(fit, CandidateFailure)
        # source: statsmodels OLS (pinv) standard errors of the two designs at the estimate;
        # rel 1e-7 (the column-scaled normal equations keep about nine digits below
        # condition 1e7, the QR path more)
        np.testing.assert_allclose(fit.std_errors, _ols_std_errors(z, Xf, x, fit.powers), rtol=1e-7)
    # the collinear fixed columns (scaled condition ~1e12) fail the check: QR for each
    assert len(exact) == (len(problems) if kind == "collinear" else 0)


@pytest.mark.parametrize("bc", [True, False])
def test_stacked_power_columns_equal_the_closed_form(bc):
    rng = np.random.default_rng(31)
    F, k, b = 6, 2, 500
    x = rng.uniform(0.2, 40.0, (F, k, b))
    x[:, :, :5] = 1.0 + 1e-5 * rng.normal(size=(F, k, 5))  # u = a log x near 0: the series
    A = np.array([[0.7, -1.3], [0.0, 2.0], [1e-13, -0.4], [3.0, -3.0], [1e-4, 0.5], [1, 1]])
    L = np.log(x)
    WD = np.empty((F, 2 * k, b))
    bt._power_columns_into(L, A, bc, WD[:, :k], WD[:, k:])
    for f in range(F):
        W1, D1 = bt.power_columns(L[f].T, A[f], bc)
        # source: power_columns, one problem's columns: the same arithmetic element for element
        np.testing.assert_array_equal(WD[f, :k], W1.T)
        np.testing.assert_array_equal(WD[f, k:], D1.T)
        # source: as above, the power columns alone of one table at every power vector
        np.testing.assert_array_equal(
            bt.power_w_stacked(L[0].T, A, bc)[f], bt.power_columns(L[0].T, A[f], bc)[0]
        )
        for j in range(k):
            a, xj, Lj = A[f, j], x[f, j], L[f, j]
            if bc and abs(a) < 1e-12:
                w, dw = Lj, 0.5 * Lj**2
            elif bc:
                # source: the Box-Cox column (x^a - 1) / a and its derivative in a,
                # (x^a log x - w) / a (closed forms; near a log x = 0 the difference cancels,
                # so those rows are compared with an absolute tolerance)
                w = (xj**a - 1.0) / a
                dw = (xj**a * Lj - w) / a
            else:
                w, dw = xj**a, xj**a * Lj  # source: x^a and its derivative x^a log x
            np.testing.assert_allclose(WD[f, j], w, rtol=1e-12, atol=1e-9)
            if bc and abs(a) >= 1e-12:
                # source: numpy.expm1 (x^a - 1 without cancellation); exp(u) - 1 above
                # EXPM1_BELOW is within a few units in the last place of it
                np.testing.assert_allclose(WD[f, j], np.expm1(a * Lj) / a, rtol=1e-14, atol=0)
            np.testing.assert_allclose(WD[f, k + j], dw, rtol=1e-9, atol=1e-6)


@pytest.mark.parametrize("bc", [True, False])
@pytest.mark.parametrize("kind", ["random", "collinear", "badly_scaled"])
def test_folds_of_unequal_sizes_equal_the_fold_by_fold_fits(kind, bc):
    rng = np.random.default_rng(len(kind) + 3 * bc)
    n = 203  # 5 folds of 40 or 41 held-out rows: training sets of 162 and 163 rows
    train = _fold_rows(n, 5, 4) + _fold_rows(n, 5, 5)
    assert len({rows.size for rows in train}) == 2
    problems = []
    for c in range(3):
        z, Xf, x = _candidate(kind, rng, n, 1 + c % 2)
        if not bc:  # plain powers x^a beside the fixed columns: no constant column
            Xf = Xf[:, 1:]
        start = bt.estimate_powers(z, Xf, x, boxcox_form=bc).powers
        problems.append(bt.FoldPowerProblem(z, Xf, x, train, start))
    got = bt.estimate_many_fold_powers(problems, boxcox_form=bc)
    for pr, fits in zip(problems, got, strict=True):
        assert not isinstance(fits, CandidateFailure)
        for rows, fit in zip(pr.train, fits, strict=True):
            one = bt.estimate_powers(
                pr.z[rows], pr.Xf[rows], pr.x[rows], start=pr.start, boxcox_form=bc, with_se=False
            )
            # source: estimate_powers on the fold's training rows alone (its own
            # cross-products, no padding); abs 1e-6 (the iteration stops at steps below
            # 1e-6), RSS rel 1e-9
            np.testing.assert_allclose(fit.powers, one.powers, rtol=0, atol=1e-6)
            assert fit.rss == pytest.approx(one.rss, rel=1e-9)


@pytest.mark.parametrize("kind", ["random", "collinear", "badly_scaled"])
def test_rss_of_many_powers_equals_statsmodels_ols(kind):
    rng = np.random.default_rng(len(kind) + 40)
    n = 150
    z, Xf, x = _candidate(kind, rng, n, 2)
    prob = bt._Problem(z, Xf, np.log(x), True)
    A = np.array([[1.0, 1.0], [0.0, 0.5], [-2.5, 3.0], [0.3, -1e-13], [2.9, -0.7]])
    got = prob.rss_many(A)
    for a, rss in zip(A, got, strict=True):
        cols = [
            np.log(x[:, j]) if abs(a[j]) < 1e-12 else (x[:, j] ** a[j] - 1) / a[j] for j in (0, 1)
        ]
        ref = sm.OLS(z, np.column_stack([Xf, *cols])).fit(method="qr").ssr
        # source: statsmodels OLS (QR) on [X_f, (x^a - 1)/a]; rel 1e-8 (normal equations below
        # condition 1e7 keep about nine digits of the coefficients, the RSS is second order)
        assert rss == pytest.approx(ref, rel=1e-8)
        # source: the one-point trial of the Gauss-Newton path, the same fit
        assert rss == pytest.approx(prob.trial(a)[0], rel=1e-10)
    x_big = x.copy()
    x_big[0, 0] = 1e120  # x^3 overflows: the column is not finite, the RSS is inf
    big = bt._Problem(z, Xf, np.log(x_big), True)
    assert big.rss_many(np.array([[3.0, 1.0], [1.0, 1.0]]))[0] == np.inf
    assert np.isfinite(big.rss_many(np.array([[1.0, 1.0]]))[0])


def test_extrapolated_step_of_one_power_is_the_secant_step():
    # an affine step function s(a) = m (a - a*) with m in (-2, 0): a contracting
    # Gauss-Newton map (rate 1 + m, alternating for m < -1)
    a_star = 0.37
    for m in (-1.7, -0.9, -0.45, -0.1):
        a0, a1 = np.array([0.9]), np.array([0.6])
        s0, s1 = m * (a0 - a_star), m * (a1 - a_star)
        step = bt._extrapolated(a1, s1, a0, s0)
        # source: the secant method is exact on an affine function (any numerical-analysis
        # text, e.g. Burden & Faires, "Numerical Analysis", section 2.3; from memory)
        assert a1[0] + step[0] == pytest.approx(a_star, abs=1e-14)
    a0, a1 = np.array([0.9]), np.array([0.6])
    # a growing step (rate above 1) or one more than EXTRAPOLATION_MAX steps long: refused
    assert np.isnan(bt._extrapolated(a1, 0.5 * (a1 - a_star), a0, 0.5 * (a0 - a_star))).all()
    m = -1.0 / (2.0 * bt.EXTRAPOLATION_MAX)
    assert np.isnan(bt._extrapolated(a1, m * (a1 - a_star), a0, m * (a0 - a_star))).all()
    # a stack of folds: row by row the same step as one fold at a time
    rng = np.random.default_rng(3)
    A, S, Ap, Sp = (rng.normal(size=(6, 2)) for _ in range(4))
    stacked = bt._extrapolated(A, S, Ap, Sp)
    for f in range(6):
        np.testing.assert_array_equal(stacked[f], bt._extrapolated(A[f], S[f], Ap[f], Sp[f]))


def test_extrapolation_reaches_the_rss_minimum_in_fewer_steps(monkeypatch):
    # a power the data barely determine (weak linear signal, noise sd 0.5): the plain
    # Gauss-Newton steps contract slowly
    rng = np.random.default_rng(0)
    n = 240
    x, w = rng.uniform(1, 80, n), rng.normal(size=n)
    z = 1 + 0.012 * x + 0.3 * w + rng.normal(0, 0.5, n)
    Xf = np.column_stack([np.ones(n), w])
    fit = bt.estimate_powers(z, Xf, x)
    ref = minimize_scalar(
        lambda a: _lstsq_rss(z, Xf, x, a),
        bounds=(fit.powers[0] - 0.5, fit.powers[0] + 0.5),
        method="bounded",
        options={"xatol": 1e-10},
    )
    # source: statsmodels OLS residual sum of squares minimised over the power by
    # scipy.optimize.minimize_scalar (bounded Brent); abs 1e-5 as for every estimate
    assert fit.method == "box_tidwell" and fit.converged
    assert fit.powers[0] == pytest.approx(ref.x, abs=1e-5)
    assert fit.rss == pytest.approx(ref.fun, rel=1e-9)
    monkeypatch.setattr(bt, "_extrapolated", lambda a, s, a_prev, s_prev: np.full(s.shape, np.nan))
    plain = bt.estimate_powers(z, Xf, x)
    assert plain.powers[0] == pytest.approx(ref.x, abs=1e-5)  # source: as above
    assert fit.iterations * 2 <= plain.iterations
