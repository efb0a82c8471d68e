"""Batched scoring (service/core/batchcv.py) against the one-candidate path and against
refits written out: same fold errors, pooled errors, standard errors and failures.

Tolerance (fixed in advance): rel 1e-10 against Scorer.score (the same arithmetic in another
order); rel 1e-8 against numpy lstsq refits with Duan smearing written out.
"""

from __future__ import annotations

import itertools
import math
import zlib

import numpy as np
import pytest
from service.core import batchcv
from service.core import transforms as tr
from service.core.bank import ColumnBank, FoldIndex
from service.core.batchcv import batchable, score_many
from service.core.errors import CandidateFailure
from service.core.fastcv import Scorer
from service.core.folds import make_plan


def _bank(kind: str, n: int, seed: int, repeats: int = 2):
    rng = np.random.default_rng(seed)
    x1 = rng.uniform(1, 5, n)
    x2 = rng.uniform(0.5, 3, n)
    cols = [np.ones(n), x1, np.log(x1), np.sqrt(x1), x2, np.log(x2), 1 / x2]
    if kind == "collinear":  # an almost repeated column: those candidates need the QR refit
        cols.append(x1 + 1e-6 * rng.normal(0, 1, n))
    elif kind == "badly_scaled":
        cols += [1e6 * x1, 1990.0 + 30 * rng.uniform(0, 1, n)]
    X = np.column_stack(cols)
    y = np.exp(1.0 + 0.4 * np.log(x1) - 0.3 * x2 + rng.normal(0, 0.15, n))
    plan = make_plan(n, 5, repeats, 3)
    return ColumnBank.of_matrix(X, FoldIndex.of(plan, n)), y, plan


def _candidates(m: int, p: int):
    return [[0, *c] for c in itertools.combinations(range(1, m), p - 1)]


RESPONSES = {
    "identity": tr.Transform("identity"),
    "log": tr.Transform("log", shift=0.0),
    "sqrt": tr.Transform("sqrt"),
    "reciprocal": tr.Transform("reciprocal"),
    "square": tr.Transform("square"),
}


@pytest.mark.parametrize("kind", ["random", "collinear", "badly_scaled"])
@pytest.mark.parametrize("family", list(RESPONSES))
@pytest.mark.parametrize("metric", ["rmse", "mae"])
def test_a_batch_equals_one_candidate_at_a_time(kind, family, metric):
    bank, y, plan = _bank(kind, 160, zlib.crc32(f"{kind}{family}".encode()))
    plan = make_plan(y.size, 5, 2, 3, metric)
    bank = ColumnBank.of_matrix(bank.X, FoldIndex.of(plan, y.size))
    scorer = Scorer(bank, y, plan, False)
    t = RESPONSES[family]
    assert batchable(scorer, t)
    cands = _candidates(bank.m, 3)
    got = score_many(scorer, t, cands, [None] * len(cands))
    for cols, g in zip(cands, got, strict=True):
        try:
            ref = scorer.score(t, cols)
        except CandidateFailure as exc:
            assert isinstance(g, CandidateFailure) and g.reason == exc.reason
            continue
        assert not isinstance(g, CandidateFailure), (cols, g)
        # source: Scorer.score, the one-candidate path (checked against lstsq in test_fastcv)
        np.testing.assert_allclose(g.fold_values, ref.fold_values, rtol=1e-10)
        assert g.value == pytest.approx(ref.value, rel=1e-10)
        assert g.std_error == pytest.approx(ref.std_error, rel=1e-9, abs=1e-300)
        for key in ("rmse", "mae"):
            assert g.summary.of(key) == pytest.approx(ref.summary.of(key), rel=1e-10)
        assert g.exact_refits == ref.exact_refits


def test_log_smearing_matches_refits_written_out():
    bank, y, plan = _bank("random", 120, 7, repeats=1)
    scorer = Scorer(bank, y, plan, False)
    t = RESPONSES["log"]
    cols = [0, 2, 5]
    (g,) = score_many(scorer, t, [cols], [None])
    X = bank.X[:, cols]
    sq = []
    for k in range(plan.folds):
        te, trn = plan.assignments[0] == k, plan.assignments[0] != k
        # source: numpy.linalg.lstsq on the training rows; Duan (1983) smearing written out
        b = np.linalg.lstsq(X[trn], np.log(y[trn]), rcond=None)[0]
        e = np.log(y[trn]) - X[trn] @ b
        mean = np.exp(X[te] @ b)[:, None] * np.exp(e)[None, :]
        sq.append(math.sqrt(float(np.mean((y[te] - mean.mean(axis=1)) ** 2))))
    np.testing.assert_allclose(g.fold_values, sq, rtol=1e-8)


def test_per_fold_scales_and_undefined_mape_are_not_batched():
    bank, y, plan = _bank("random", 80, 9, repeats=1)
    scorer = Scorer(bank, y, plan, False)
    assert not batchable(scorer, tr.Transform("box_cox"))  # lambda estimated per fold
    zeros = y.copy()
    zeros[3] = 0.0
    assert not batchable(Scorer(bank, zeros, plan, True), tr.Transform("log"))  # shift per fold
    mape = make_plan(y.size, 5, 1, 3, "mape")
    assert not batchable(
        Scorer(ColumnBank.of_matrix(bank.X, FoldIndex.of(mape, y.size)), zeros, mape, False),
        tr.Transform("identity"),
    )
    # score_many still answers them, one candidate at a time
    got = score_many(scorer, tr.Transform("box_cox"), [[0, 1], [0, 4]], [None, None])
    ref = [scorer.score(tr.Transform("box_cox"), c) for c in ([0, 1], [0, 4])]
    assert [g.value for g in got] == [r.value for r in ref]


def test_candidates_of_different_sizes_keep_their_order():
    bank, y, plan = _bank("random", 100, 4, repeats=1)
    scorer = Scorer(bank, y, plan, False)
    cands = [[0, 1], [0, 1, 4], [0, 2], [0, 2, 5, 6]]
    got = score_many(scorer, RESPONSES["sqrt"], cands, [None] * 4)
    for cols, g in zip(cands, got, strict=True):
        assert g.value == pytest.approx(scorer.score(RESPONSES["sqrt"], cols).value, rel=1e-10)


def test_square_root_with_terms_cut_off_at_zero_matches_one_at_a_time():
    """Near zero some smeared terms max(eta + e, 0)^2 are cut off: the closed form no longer
    holds there and those folds take retransform's exact sums."""
    rng = np.random.default_rng(12)
    n = 150
    x = rng.uniform(0, 3, n)
    y = np.maximum(0.05 + 0.3 * x + rng.normal(0, 0.25, n), 0.01) ** 2
    X = np.column_stack([np.ones(n), x, np.sqrt(x + 0.1), np.log(x + 0.1)])
    plan = make_plan(n, 5, 1, 2)
    scorer = Scorer(ColumnBank.of_matrix(X, FoldIndex.of(plan, n)), y, plan, False)
    t = RESPONSES["sqrt"]
    cands = _candidates(X.shape[1], 2) + _candidates(X.shape[1], 3)
    z = np.sqrt(y)
    assert np.min(z) < 0.2  # predictions near zero: some terms are cut off
    got = score_many(scorer, t, cands, [None] * len(cands))
    for cols, g in zip(cands, got, strict=True):
        # source: Scorer.score, the one-candidate path
        assert g.value == pytest.approx(scorer.score(t, cols).value, rel=1e-10)


def _grid(n: int, seed: int):
    """Positive predictors on five scales each (a practitioner's grid); 1/y held-out
    predictions reach 0 or below for some candidates."""
    rng = np.random.default_rng(seed)
    xs = [rng.uniform(0.5, 20.0, n) * (1 + j) for j in range(3)]
    y = np.exp(4.0 + 0.5 * np.log(xs[0]) + 0.03 * xs[1] - 0.2 * np.sqrt(xs[2]))
    y = y * np.exp(rng.normal(0, 0.3, n))
    scales = [lambda v: v, np.log, np.sqrt, lambda v: 1 / v, np.square]
    cols = [np.ones(n)] + [f(x) for x in xs for f in scales]
    plan = make_plan(n, 5, 2, 0)
    bank = ColumnBank.of_matrix(np.column_stack(cols), FoldIndex.of(plan, n))
    sets = [
        [0, *(1 + 5 * j + c for j, c in enumerate(combo))]
        for combo in itertools.product(range(5), repeat=3)
    ]
    return bank, y, plan, sets


@pytest.mark.parametrize(
    "t",
    [
        RESPONSES["reciprocal"],
        RESPONSES["square"],
        RESPONSES["log"],
        tr.Transform("box_cox", lam=-0.5),
        tr.Transform("power", exponent=-2.0),
    ],
    ids=lambda t: t.label("y"),
)
def test_undefined_back_transforms_fail_in_the_batch_with_the_one_candidate_reason(t):
    bank, y, plan, sets = _grid(400, 5)
    scorer = Scorer(bank, y, plan, False)
    batch = batchcv._batch(scorer, t, sets)
    got = score_many(scorer, t, sets, [None] * len(sets))
    reasons = 0
    for cols, b, g in zip(sets, batch, got, strict=True):
        try:
            one = scorer.score(t, cols)
        except CandidateFailure as exc:
            # source: Scorer.score, the one-candidate path: the same reason, word for word
            assert isinstance(g, CandidateFailure) and str(g) == str(exc)
            reasons += isinstance(b, CandidateFailure)  # settled by the batch itself
            continue
        assert not isinstance(g, CandidateFailure)
        # rel 1e-8 here, not 1e-10: next to the pole a held-out mean is tens of millions
        # and amplifies the last-bit difference between the two paths' fitted values (an
        # einsum against a matrix product) by |p| |delta eta| / base; measured 8e-11 to
        # 3.3e-9 relative depending on the solver's rounding (for box_cox(y, -0.5) on
        # columns [0, 2, 8, 11] one ulp more or less in a fold's solution moves the value
        # by 3.3e-9 whichever path computes it)
        assert g.value == pytest.approx(one.value, rel=1e-8)
    if t.name == "reciprocal":
        assert reasons >= 5


@pytest.mark.parametrize("family", ["identity", "log", "sqrt", "reciprocal"])
def test_a_wide_bank_takes_each_candidates_own_columns_with_the_same_numbers(monkeypatch, family):
    """Fitted values from the candidates' own columns (the path for banks with many columns
    per candidate column) equal those of the one product over the bank's columns."""
    bank, y, plan = _bank("badly_scaled", 150, 31)
    scorer = Scorer(bank, y, plan, False)
    t = RESPONSES[family]
    cands = _candidates(bank.m, 3)
    dense = score_many(scorer, t, cands, [None] * len(cands))
    monkeypatch.setattr(batchcv, "DENSE_COLUMNS", 0)
    wide = score_many(scorer, t, cands, [None] * len(cands))
    for cols, d, w in zip(cands, dense, wide, strict=True):
        one = _alone_or_reason(scorer, t, cols)
        if isinstance(one, str):
            assert isinstance(w, CandidateFailure) and w.reason == one
            continue
        # source: Scorer.score, the one-candidate path
        assert w.value == pytest.approx(one.value, rel=1e-10)
        assert d.value == pytest.approx(w.value, rel=1e-10)


def _alone_or_reason(scorer, t, cols):
    try:
        return scorer.score(t, cols)
    except CandidateFailure as exc:
        return exc.reason
