"""Per-fold scoring (service/core/fastcv.py) against exact refits: fold errors from downdated
Gram matrices and the exact-refit fallback on ill-conditioned designs.  (The downdating itself
is checked in test_bank.py, the solver in test_fitting.py, the smearing shortcuts in
test_smear_tree.py.)

Tolerance (fixed in advance): fold errors rel 1e-8 against numpy.linalg.lstsq refits with
smearing written out (Duan 1983).
"""

from __future__ import annotations

import math
import zlib

import numpy as np
import pytest
from service.core import transforms as tr
from service.core.bank import ColumnBank, FoldIndex
from service.core.fastcv import Scorer
from service.core.folds import make_plan


def _designs(kind: str, rng, n: int) -> np.ndarray:
    x1 = rng.uniform(1, 5, n)
    x2 = rng.normal(0, 1, n)
    if kind == "random":
        return np.column_stack([np.ones(n), x1, x2, rng.uniform(0, 1, n)])
    if kind == "collinear":  # cond of the scaled Gram matrix ~ 1e10: exact-refit fallback
        return np.column_stack([np.ones(n), x1, x1 + 1e-5 * rng.normal(0, 1, n), x2])
    # badly scaled: columns on 1e-6 .. 1e6 and a calendar year beside the intercept
    return np.column_stack(
        [np.ones(n), 1e6 * x1, 1e-6 * rng.uniform(1, 2, n), 1990.0 + rng.uniform(0, 30, n)]
    )


def _lstsq_cv(X, y, forward, inverse, plan):
    """Per-fold lstsq solutions and smeared RMSE, written out."""
    sols, errs = [], []
    for a in plan.assignments:
        for k in range(plan.folds):
            te, trn = a == k, a != k
            z = forward(y[trn])
            scale = np.sqrt(np.sum(X[trn] ** 2, axis=0))
            # source: numpy.linalg.lstsq (SVD) on the column-scaled training rows
            b = np.linalg.lstsq(X[trn] / scale, z, rcond=None)[0] / scale
            e = z - X[trn] @ b
            eta = X[te] @ b
            # source: Duan (1983) smearing estimate, mean over training residuals
            mean = inverse(eta[:, None] + e[None, :]).mean(axis=1)
            sols.append(b)
            errs.append(math.sqrt(float(np.mean((y[te] - mean) ** 2))))
    return np.array(sols), np.array(errs)


FAMILIES = {
    "identity": (tr.Transform("identity"), lambda v: v, lambda v: v),
    "log": (tr.Transform("log", shift=0.0), np.log, np.exp),
    "sqrt": (tr.Transform("sqrt"), np.sqrt, lambda v: np.maximum(v, 0) ** 2),
    "square": (tr.Transform("square"), np.square, lambda v: np.sqrt(np.maximum(v, 0))),
}


@pytest.mark.parametrize("kind", ["random", "collinear", "badly_scaled"])
@pytest.mark.parametrize("family", list(FAMILIES))
def test_fold_errors_equal_exact_refits(kind, family):
    rng = np.random.default_rng(zlib.crc32(f"{kind}/{family}".encode()))
    n = 157
    X = _designs(kind, rng, n)
    Xc = (X[:, 1:] - X[:, 1:].mean(0)) / X[:, 1:].std(0)
    y = np.exp(1.5 + 0.1 * Xc.sum(axis=1) + rng.normal(0, 0.1, n))
    plan = make_plan(n, 5, 2, 3)
    t, fwd, inv = FAMILIES[family]
    bank = ColumnBank.of_matrix(X, FoldIndex.of(plan, n))
    res = Scorer(bank, y, plan, False).score(t, list(range(X.shape[1])))
    _, errs = _lstsq_cv(X, y, fwd, inv, plan)
    # source: exact refit per fold (numpy lstsq) with smearing written out; rel 1e-8
    np.testing.assert_allclose(res.fold_values, errs, rtol=1e-8)
    if kind == "collinear":
        assert res.exact_refits == plan.n_splits  # every fold took the QR path


def _bt_rss(z, Xf, x, a):
    col = np.log(x) if abs(a) < 1e-12 else (x**a - 1.0) / a
    A = np.column_stack([Xf, col])
    # source: numpy.linalg.lstsq (SVD) least squares on the training rows
    b = np.linalg.lstsq(A, z, rcond=None)[0]
    r = z - A @ b
    return float(r @ r), b


@pytest.mark.parametrize("kind", ["random", "collinear"])
def test_estimated_power_folds_equal_refits_at_each_folds_own_minimum(kind):
    from scipy.optimize import minimize_scalar
    from service.core import boxtidwell as bt
    from service.core.cvresult import Dynamic

    rng = np.random.default_rng(zlib.crc32(kind.encode()))
    n = 200
    X = _designs(kind, rng, n)[:, :3]  # intercept and two fixed columns (collinear: cond ~1e10)
    x = rng.uniform(1, 9, n)
    y = np.exp(1.0 + 0.4 * np.sqrt(x) + 0.1 * X[:, 2] + rng.normal(0, 0.1, n))
    z = np.log(y)
    plan = make_plan(n, 5, 2, 3)
    bank = ColumnBank.of_matrix(X, FoldIndex.of(plan, n))
    start = bt.estimate_powers(z, X, x).powers
    dyn = Dynamic([3], x[:, None], start)
    res = Scorer(bank, y, plan, False).score(tr.Transform("log", shift=0.0), [0, 1, 2], None, dyn)
    assert len(res.fold_powers) == plan.n_splits
    j = 0
    for a in plan.assignments:
        for k in range(plan.folds):
            te, trn = a == k, a != k
            ref = minimize_scalar(
                lambda v, trn=trn: _bt_rss(z[trn], X[trn], x[trn], v)[0],
                bounds=(start[0] - 0.5, start[0] + 0.5),
                method="bounded",
                options={"xatol": 1e-10},
            )
            # source: lstsq RSS minimised over the power by scipy.optimize.minimize_scalar
            # on the fold's training rows; abs 1e-5 (iteration stops at steps below 1e-6)
            assert res.fold_powers[j][0] == pytest.approx(ref.x, abs=1e-5)
            _, b = _bt_rss(z[trn], X[trn], x[trn], res.fold_powers[j][0])
            ap = res.fold_powers[j][0]
            col = (x**ap - 1.0) / ap
            e = z[trn] - np.column_stack([X, col])[trn] @ b
            eta = np.column_stack([X, col])[te] @ b
            # source: Duan (1983) smearing, written out, at the fold's own power; rel 1e-8
            mean = np.exp(eta[:, None] + e[None, :]).mean(axis=1)
            err = math.sqrt(float(np.mean((y[te] - mean) ** 2)))
            assert res.fold_values[j] == pytest.approx(err, rel=1e-8)
            j += 1
    if kind == "collinear":
        assert res.exact_refits == plan.n_splits  # every fold's final fit took the QR path


def test_estimated_powers_that_fail_in_a_fold_fail_the_candidate_naming_the_fold(monkeypatch):
    from service.core import boxtidwell as bt
    from service.core.cvresult import Dynamic
    from service.core.errors import CandidateFailure

    rng = np.random.default_rng(2)
    n = 150
    x = rng.uniform(1, 9, (n, 3))
    y = np.exp(1.0 + 0.2 * np.sqrt(x).sum(axis=1) + rng.normal(0, 0.1, n))
    plan = make_plan(n, 5, 2, 0)
    bank = ColumnBank.of_matrix(np.ones((n, 1)), FoldIndex.of(plan, n))
    monkeypatch.setattr(bt, "MAX_ITER", 0)  # no fold converges; 3 powers have no profile search
    with pytest.raises(CandidateFailure, match=r"^fold 1: the Box-Tidwell iteration for 3 powers"):
        Scorer(bank, y, plan, False).score(
            tr.Transform("log", shift=0.0), [0], None, Dynamic([1, 2, 3], x, np.ones(3))
        )


@pytest.mark.parametrize("family", ["identity", "log"])
def test_out_of_fold_alone_equals_the_first_repeat_of_a_full_scoring(family):
    """The CV+ block is the first repeat's fits and held-out residuals; computing it alone
    must give exactly what a full scoring keeps, and the residuals must be the lstsq ones."""
    rng = np.random.default_rng(11)
    n = 90
    X = _designs("random", rng, n)
    y = np.exp(1.0 + 0.2 * X[:, 1] + rng.normal(0, 0.1, n))
    plan = make_plan(n, 4, 3, 8)
    t, fwd, inv = FAMILIES[family]
    scorer = Scorer(ColumnBank.of_matrix(X, FoldIndex.of(plan, n)), y, plan, False)
    cols = list(range(X.shape[1]))
    full = scorer.score(t, cols, keep_out_of_fold=True).out_of_fold
    alone = scorer.out_of_fold(t, cols)
    assert full is not None
    np.testing.assert_array_equal(alone.fold, full.fold)
    np.testing.assert_array_equal(alone.residual, full.residual)
    np.testing.assert_array_equal(alone.coefficients, full.coefficients)
    sols, _ = _lstsq_cv(X, y, fwd, inv, plan)
    # source: numpy lstsq refits of the first repeat's folds (rows of _lstsq_cv's output)
    np.testing.assert_allclose(alone.coefficients, sols[: plan.folds], rtol=1e-8)
    a = plan.assignments[0]
    expect = fwd(y) - np.einsum("ij,ij->i", X, sols[a])
    np.testing.assert_allclose(alone.residual, expect, rtol=1e-8, atol=1e-12)


def test_estimated_powers_with_a_log_shift_fitted_in_every_fold():
    from service.core import boxtidwell as bt
    from service.core.cvresult import Dynamic

    rng = np.random.default_rng(23)
    n = 180
    x = rng.uniform(1, 9, n)
    y = np.round(np.exp(0.5 + 0.6 * np.sqrt(x) + rng.normal(0, 0.3, n)) - 2.0, 1)
    y[y < 0] = 0.0  # zeros: the log needs a shift, chosen on each training fold
    plan = make_plan(n, 4, 2, 1)
    index = FoldIndex.of(plan, n)
    bank = ColumnBank.of_matrix(np.ones((n, 1)), index)
    t = tr.Transform("log")
    z_all = tr.Transform("log", shift=tr.chosen_shift(y)).forward(y)
    start = bt.estimate_powers(z_all, np.ones((n, 1)), x).powers
    res = Scorer(bank, y, plan, True).score(t, [0], None, Dynamic([1], x[:, None], start))
    j = 0
    for r in range(plan.repeats):
        for rows in index.train[r]:
            zk = tr.Transform("log", shift=tr.chosen_shift(y[rows])).forward(y)
            one = bt.estimate_powers(
                zk[rows], np.ones((rows.size, 1)), x[rows], start=start, with_se=False
            )
            # source: the fold-by-fold estimate on the fold's own log shift and rows
            assert res.fold_powers[j][0] == pytest.approx(one.powers[0], abs=1e-5)
            j += 1


def test_large_tables_take_the_folds_one_by_one_with_the_same_results(monkeypatch):
    from service.core import boxtidwell as bt
    from service.core import fastcv
    from service.core.cvresult import Dynamic

    rng = np.random.default_rng(29)
    n = 160
    X = np.column_stack([np.ones(n), rng.normal(size=n)])
    x = rng.uniform(1, 9, n)
    y = np.exp(1.0 + 0.4 * np.sqrt(x) + 0.1 * X[:, 1] + rng.normal(0, 0.1, n))
    plan = make_plan(n, 5, 2, 0)
    bank = ColumnBank.of_matrix(np.column_stack([X, np.log(x)]), FoldIndex.of(plan, n))
    start = bt.estimate_powers(np.log(y), X, x).powers

    def run():
        sc = Scorer(bank, y, plan, False)
        powers = sc.score(
            tr.Transform("log", shift=0.0), [0, 1], None, Dynamic([2], x[:, None], start)
        )
        lams = sc.score(tr.Transform("box_cox"), [0, 1, 2])
        return powers, lams

    batched = run()
    monkeypatch.setattr(fastcv, "POWER_BATCH_CELLS", 0)
    monkeypatch.setattr(fastcv, "LAMBDA_BATCH_CELLS", 0)
    one_by_one = run()
    # source: the fold-by-fold estimates (estimate_powers / estimate_lambda per fold); they
    # stop within the iterations' tolerances of the same optima
    np.testing.assert_allclose(batched[0].fold_powers, one_by_one[0].fold_powers, atol=1e-5)
    np.testing.assert_allclose(batched[0].fold_values, one_by_one[0].fold_values, rtol=1e-6)
    np.testing.assert_allclose(batched[1].fold_lambdas, one_by_one[1].fold_lambdas, atol=1e-6)
    np.testing.assert_allclose(batched[1].fold_values, one_by_one[1].fold_values, rtol=1e-6)


@pytest.mark.parametrize("kind", ["random", "collinear", "badly_scaled"])
def test_powers_and_lambdas_found_for_many_candidates_score_as_each_alone(kind):
    from service.core import boxtidwell as bt
    from service.core.cvresult import Dynamic

    rng = np.random.default_rng(zlib.crc32(f"many/{kind}".encode()))
    n = 180
    X = _designs(kind, rng, n)
    x = rng.uniform(1, 9, (n, 2))
    y = np.round(
        np.exp(0.5 + 0.3 * np.sqrt(x[:, 0]) + 0.2 * np.log(x[:, 1])) + rng.normal(0, 0.3, n), 1
    )
    y[:3] = 0.0  # zeros: a log's shift is chosen in every fold (a response per fold)
    plan = make_plan(n, 5, 2, 6)
    bank = ColumnBank.of_matrix(X, FoldIndex.of(plan, n))
    scorer = Scorer(bank, y, plan, True)
    sqrt, log = tr.Transform("sqrt"), tr.Transform("log")
    items = []
    for t, cols, k in ((sqrt, [0, 1], 1), (sqrt, [0, 1, 3], 2), (log, [0, 2], 1), (sqrt, [0], 2)):
        z = scorer.fixed_response(t)[1] if t is sqrt else np.log(y + tr.chosen_shift(y))
        start = bt.estimate_powers(z, X[:, cols], x[:, :k]).powers
        items.append((t, cols, Dynamic(list(range(len(cols), len(cols) + k)), x[:, :k], start)))
    found = scorer.powers_many(items)
    assert all(f is not None for f in found)
    for (t, cols, dyn), f in zip(items, found, strict=True):
        alone = scorer.score(t, cols, None, dyn)
        got = scorer.score(t, cols, None, dyn, found=f)
        # source: the one-candidate path (Scorer.score finding its own fold powers)
        np.testing.assert_allclose(got.fold_powers, alone.fold_powers, rtol=1e-9, atol=1e-12)
        np.testing.assert_allclose(got.fold_values, alone.fold_values, rtol=1e-9)
        assert got.value == pytest.approx(alone.value, rel=1e-9)
        assert got.exact_refits == alone.exact_refits
    pos = y > 0
    scorer = Scorer(
        ColumnBank.of_matrix(
            X[pos], FoldIndex.of(make_plan(int(pos.sum()), 5, 2, 6), int(pos.sum()))
        ),
        y[pos],
        make_plan(int(pos.sum()), 5, 2, 6),
        False,
    )
    lam_items = [
        (tr.Transform("box_cox"), [0, 1]),
        (tr.Transform("box_cox"), [0, 1, 3]),
        (tr.Transform("yeo_johnson"), [0, 2]),
        (sqrt, [0]),
    ]
    found = scorer.lambdas_many(lam_items)
    assert found[-1] is None  # nothing to estimate: scored as before
    for (t, cols), f in zip(lam_items[:3], found[:3], strict=True):
        alone = scorer.score(t, cols)
        got = scorer.score(t, cols, found=f)
        # source: the one-candidate path (Scorer.score finding its own fold lambdas)
        np.testing.assert_allclose(got.fold_lambdas, alone.fold_lambdas, rtol=1e-9)
        np.testing.assert_allclose(got.fold_values, alone.fold_values, rtol=1e-9)


def test_candidates_the_batch_cannot_settle_are_left_to_score_alone(monkeypatch):
    from service.core import boxtidwell as bt
    from service.core import fastcv
    from service.core.cvresult import Dynamic
    from service.core.errors import CandidateFailure

    rng = np.random.default_rng(2)
    n = 150
    x = rng.uniform(1, 9, (n, 3))
    y = np.exp(1.0 + 0.2 * np.sqrt(x).sum(axis=1) + rng.normal(0, 0.1, n))
    plan = make_plan(n, 5, 2, 0)
    scorer = Scorer(ColumnBank.of_matrix(np.ones((n, 1)), FoldIndex.of(plan, n)), y, plan, False)
    log = tr.Transform("log", shift=0.0)
    three = Dynamic([1, 2, 3], x, np.ones(3))
    one = Dynamic([1], x[:, :1], np.ones(1))
    monkeypatch.setattr(bt, "MAX_ITER", 0)  # 3 powers without steps: every fold fails
    found = scorer.powers_many([(log, [0], three), (log, [0], one)])
    assert found[0] is None and found[1] is not None
    with pytest.raises(CandidateFailure, match=r"^fold 1: the Box-Tidwell iteration for 3"):
        scorer.score(log, [0], None, three, found=found[0])  # alone: its own first failure
    monkeypatch.setattr(fastcv, "POWER_BATCH_CELLS", n * 5)  # one repeat's folds at most
    assert scorer.powers_many([(log, [0], one)]) == [None]


def _many_items(scorer, X, x, kinds):
    """(t, cols, names, dynamic, found) of candidates of every kind the search scores with
    Scorer.score_many: fixed scales, per-fold lambdas and per-fold powers (found together)."""
    from service.core import boxtidwell as bt
    from service.core.cvresult import Dynamic

    items = []
    for t, cols in kinds["fixed"]:
        items.append((t, cols, None, None, None))
    lam = kinds["lambda"]
    for (t, cols), f in zip(lam, scorer.lambdas_many(lam), strict=True):
        items.append((t, cols, None, None, f))
    dyn = []
    for t, cols, k in kinds["powers"]:
        z = scorer.fixed_response(t)[1]
        start = bt.estimate_powers(z, X[:, cols], x[:, :k]).powers
        dyn.append((t, cols, Dynamic(list(range(len(cols), len(cols) + k)), x[:, :k], start)))
    for (t, cols, d), f in zip(dyn, scorer.powers_many(dyn), strict=True):
        items.append((t, cols, None, d, f))
    return items


@pytest.mark.parametrize("kind", ["random", "collinear", "badly_scaled"])
def test_many_candidates_scored_together_equal_each_scored_alone(kind):
    from service.core.errors import CandidateFailure

    rng = np.random.default_rng(zlib.crc32(f"score_many/{kind}".encode()))
    n = 203  # folds of unequal sizes: more than one shape of held-out block
    X = _designs(kind, rng, n)
    x = rng.uniform(1, 9, (n, 2))
    y = np.exp(0.5 + 0.3 * np.sqrt(x[:, 0]) + 0.2 * np.log(x[:, 1]) + rng.normal(0, 0.2, n))
    plan = make_plan(n, 5, 2, 4)
    scorer = Scorer(ColumnBank.of_matrix(X, FoldIndex.of(plan, n)), y, plan, False)
    log, sqrt = tr.Transform("log", shift=0.0), tr.Transform("sqrt")
    recip, square = tr.Transform("reciprocal"), tr.Transform("square")
    kinds = {
        "fixed": [(recip, [0, 1]), (square, [0, 1, 3]), (log, [0, 2]), (sqrt, [0, 3])],
        "lambda": [
            (tr.Transform("box_cox"), [0, 1]),
            (tr.Transform("box_cox"), [0, 1, 3]),
            (tr.Transform("yeo_johnson"), [0, 2]),
        ],
        "powers": [(sqrt, [0, 1], 1), (recip, [0, 3], 2), (square, [0], 1), (log, [0, 2], 2)],
    }
    items = _many_items(scorer, X, x, kinds)
    got = scorer.score_many(items)
    assert len(got) == len(items)
    # the lambda and power candidates' folds are scored as one batch (not one at a time)
    batched = scorer._estimated_many(items)
    assert sorted(batched) == [4, 5, 6, 7, 8, 9, 10]
    for (t, cols, names, dyn, f), g in zip(items, got, strict=True):
        try:
            alone = scorer.score(t, cols, names, dyn, found=f)
        except CandidateFailure as exc:
            # source: Scorer.score, the one-candidate path: the same reason, word for word
            assert isinstance(g, CandidateFailure) and str(g) == str(exc)
            continue
        assert not isinstance(g, CandidateFailure), (t, cols, g)
        # source: Scorer.score, the one-candidate path (checked against lstsq refits above);
        # the smeared means agree to the smearing's stated bound (1e-12 relative)
        np.testing.assert_allclose(g.fold_values, alone.fold_values, rtol=1e-10)
        assert g.value == pytest.approx(alone.value, rel=1e-10)
        assert g.std_error == pytest.approx(alone.std_error, rel=1e-8, abs=1e-300)
        assert g.exact_refits == alone.exact_refits
        assert g.fold_lambdas == alone.fold_lambdas and g.fold_powers == alone.fold_powers


def test_many_candidates_with_undefined_back_transforms_fail_with_the_one_candidate_reason():
    from service.core.errors import CandidateFailure

    from tests.core.test_batchcv import _grid

    bank, y, plan, sets = _grid(400, 5)
    scorer = Scorer(bank, y, plan, False)
    recip = tr.Transform("reciprocal")
    items = [(recip, cols, None, None, None) for cols in sets[:60]]
    items += [(tr.Transform("box_cox"), cols, None, None, None) for cols in sets[60:70]]
    got = scorer.score_many(items)
    failures = 0
    for (t, cols, *_r), g in zip(items, got, strict=True):
        try:
            one = scorer.score(t, cols)
        except CandidateFailure as exc:
            # source: Scorer.score, the one-candidate path: the same reason, word for word
            assert isinstance(g, CandidateFailure) and str(g) == str(exc)
            failures += 1
            continue
        assert not isinstance(g, CandidateFailure)
        assert g.value == pytest.approx(one.value, rel=1e-10)
    assert failures >= 5  # 1/y predictions at or below 0 (see _grid)


def test_all_rows_lambdas_are_found_together_once_and_kept(monkeypatch):
    from service.core import fastcv
    from service.core import likelihood as lk

    rng = np.random.default_rng(12)
    n = 160
    X = np.column_stack([np.ones(n), rng.uniform(1, 10, n), rng.normal(size=n), np.zeros(n)])
    X[:, 3] = X[:, 2] + 1e-9 * rng.normal(size=n)  # collinear with column 2
    y = (1 + 0.3 * X[:, 1] + rng.normal(0, 0.15, n)) ** 2
    plan = make_plan(n, 5, 2, 3)
    scorer = Scorer(ColumnBank.of_matrix(X, FoldIndex.of(plan, n)), y, plan, False)
    calls = []
    real = lk.many_lambdas

    def counted(family, yy, designs):
        calls.append(len(designs))
        return real(family, yy, designs)

    monkeypatch.setattr(fastcv, "many_lambdas", counted)
    bc, yj = tr.Transform("box_cox"), tr.Transform("yeo_johnson")
    items = [(bc, [0, 1]), (bc, [0, 1, 2]), (yj, [0, 1]), (bc, [0, 2, 3]), (bc, [0, 1])]
    few = Scorer(scorer.bank, y, plan, False).all_rows_lambdas(items)
    assert calls == []  # fewer designs than STACKED_LAMBDAS_MIN: one by one
    monkeypatch.setattr(fastcv, "STACKED_LAMBDAS_MIN", 1)
    got = scorer.all_rows_lambdas(items)
    # source: the one-design path (grid, then scipy.optimize.minimize_scalar bounded)
    assert got == [pytest.approx(v, abs=1e-6) for v in few]
    assert sorted(calls) == [1, 3]  # one stack per family; the repeated design once
    for (t, cols), lam in zip(items, got, strict=True):
        # source: the one-design path (grid, then scipy.optimize.minimize_scalar bounded);
        # the collinear design is that path's own answer (QR residuals)
        ref = lk.fit_transform(t, y, X[:, cols]).lam
        assert lam == pytest.approx(ref, abs=1e-6)
    assert scorer.all_rows_lambdas(items[:2]) == got[:2] and sorted(calls) == [1, 3]
    scorer.score(bc, [0, 1])  # the scorer's warm start is the kept estimate
    assert sorted(calls) == [1, 3]


def test_batched_estimated_candidates_in_small_stacks_and_their_failures_equal_alone(
    monkeypatch,
):
    from service.core import fastcv
    from service.core.errors import CandidateFailure

    from tests.core.test_batchcv import _grid

    bank, y, plan, sets = _grid(400, 5)
    scorer = Scorer(bank, y, plan, False)
    lam = [(tr.Transform("box_cox"), cols) for cols in sets[60:72]]
    lam += [(tr.Transform("yeo_johnson"), cols) for cols in sets[72:76]]
    found = scorer.lambdas_many(lam)
    items = [(t, cols, None, None, f) for (t, cols), f in zip(lam, found, strict=True)]
    whole = scorer.score_many(items)
    monkeypatch.setattr(fastcv, "_STACK_FLOATS", 1)  # one candidate per stack
    assert len(scorer._estimated_many(items)) >= 8
    for (t, cols, *_r), g, h in zip(items, scorer.score_many(items), whole, strict=True):
        try:
            one = scorer.score(t, cols)
        except CandidateFailure as exc:
            # source: Scorer.score, the one-candidate path: the same reason, word for word
            assert str(g) == str(exc) and str(h) == str(exc)
            continue
        # source: Scorer.score, the one-candidate path (checked against lstsq refits above)
        assert g.value == pytest.approx(one.value, rel=1e-10)
        assert h.value == pytest.approx(one.value, rel=1e-10)
        np.testing.assert_allclose(h.fold_values, one.fold_values, rtol=1e-10)
        assert h.fold_lambdas == one.fold_lambdas


def test_training_grams_are_formed_once_per_columns_and_repeat():
    rng = np.random.default_rng(5)
    n = 90
    X = _designs("badly_scaled", rng, n)
    y = rng.uniform(1, 2, n)
    plan = make_plan(n, 5, 2, 0)
    scorer = Scorer(ColumnBank.of_matrix(X, FoldIndex.of(plan, n)), y, plan, False)
    for r in range(plan.repeats):
        for S in ([0, 1, 3], [2, 0]):
            got = scorer.train_grams(np.array(S), r)
            for k in range(plan.folds):
                rows = plan.assignments[r] != k
                Xk = X[rows][:, S]
                # source: numpy, X'X of the fold's training rows formed directly
                np.testing.assert_allclose(
                    got[k], Xk.T @ Xk, rtol=1e-9, atol=1e-9 * np.abs(Xk.T @ Xk).max()
                )
            # the same array again (read-only, as every candidate with these columns shares it)
            assert scorer.train_grams(np.array(S), r) is got and not got.flags.writeable
    assert scorer.train_grams(np.array([0, 1]), 0) is not scorer.train_grams(np.array([0, 1]), 1)
