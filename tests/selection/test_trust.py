"""How far to trust a selection: stability under the bootstrap and optimism by nested CV.

Every check is a seeded simulation whose answer is known from its construction;
the tolerances are derived from binomial or sign-test arguments stated beside them.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import pytest
from service.core.data import prepare
from service.core.errors import InputError, Option
from service.core.spec import Specification
from service.selection.deadline import Deadline
from service.selection.search import select
from service.selection.search_setup import SearchOptions
from service.selection.trust import (
    OPTIMISM_WARN_RATIO,
    RUNNER_UP_FIRST,
    assess_trust,
    has_estimated_power,
    label,
    scale_key,
    wilson_interval,
)
from statsmodels.stats.proportion import proportion_confint


def _select(prep, opts):
    result = select(prep, opts, "test")
    return result, result.winner.spec


def _clear_log_log(n=150, seed=11):
    """log(y) = 1 + 0.8 log(x) + N(0, 0.15^2), x log-uniform on [1, 100]: one right scale."""
    rng = np.random.default_rng(seed)
    x = np.exp(rng.uniform(0.0, math.log(100.0), n))
    y = np.exp(1.0 + 0.8 * np.log(x) + rng.normal(0.0, 0.15, n))
    return prepare({"columns": {"y": y.tolist(), "x": x.tolist()}}, "y", ["x"])


CLEAR_OPTS = SearchOptions(
    response_transforms=["identity", "log", "sqrt"],
    predictor_transforms=["identity", "log", "sqrt"],
    top=1,
)


def _tied_scales(n=200, seed=5):
    """y = 2 + (s + r)/2 + e with s, r the standardised sqrt(x) and -1/x of this sample, and
    e orthogonal to (1, s, r): y on sqrt(x) and y on 1/x have identical fits on all rows."""
    rng = np.random.default_rng(seed)
    x = rng.uniform(0.5, 4.0, n)
    s = np.sqrt(x)
    r = -1.0 / x
    s = (s - s.mean()) / s.std()
    r = (r - r.mean()) / r.std()
    e = rng.normal(0.0, 0.6, n)
    basis = np.column_stack([np.ones(n), s, r])
    e -= basis @ np.linalg.lstsq(basis, e, rcond=None)[0]
    y = 2.0 + 0.5 * (s + r) + e
    return prepare({"columns": {"y": y.tolist(), "x": x.tolist()}}, "y", ["x"])


TIED_OPTS = SearchOptions(
    response_transforms=["identity"], predictor_transforms=["sqrt", "reciprocal"], top=1
)


@pytest.mark.parametrize("wins,n", [(0, 20), (19, 20), (20, 20), (7, 40), (1, 3)])
def test_wilson_interval_matches_statsmodels(wins, n):
    # source: Wilson (1927) JASA 22:209-212, as computed by
    # statsmodels.stats.proportion.proportion_confint(method="wilson")
    lo, hi = proportion_confint(wins, n, alpha=0.05, method="wilson")
    assert wilson_interval(wins, n) == pytest.approx((lo, hi), abs=1e-12)


def test_stability_near_one_when_one_scale_is_clearly_right():
    prep = _clear_log_log()
    body, winner = _select(prep, CLEAR_OPTS)
    assert label(winner) == "log(y) on log(x)"  # source: the simulation's construction
    out = assess_trust(prep, CLEAR_OPTS, winner, "test", True, False, resamples=40, selection=body)
    # Tolerance: the other scales miss the curvature by many standard errors, so the true
    # share is ~1; at least 36 of 40 (0.9) allows for the bootstrap's sampling noise (a
    # true share of 0.99 gives fewer than 36 wins with probability 5e-5: binomial tail).
    st = out.stability
    assert st.usable == 40 and st.complete
    assert st.share >= 0.9
    assert st.rule_reproduces_rank_1 is True
    assert st.interval[0] <= st.share <= st.interval[1]
    assert st.runner_up is not None and st.runner_up.first_share <= 0.1
    assert not any("not settled" in w for w in out.warnings)


def test_stability_clearly_below_one_when_two_scales_fit_equally_well():
    prep = _tied_scales()
    body, winner = _select(prep, TIED_OPTS)
    out = assess_trust(prep, TIED_OPTS, winner, "test", True, False, resamples=60, selection=body)
    # The two candidates have the same simplicity and identical fits on all rows, so each
    # bootstrap resample is a near coin flip between them: the share is ~1/2.  Tolerance:
    # 0.8 is far above it (Bin(60, 1/2) exceeds 48 wins with probability 4e-7, and the
    # runner-up's 0.2 below 12 wins with the same probability).
    st = out.stability
    assert st.share <= 0.8
    names = {label(winner), label(st.runner_up.spec)}
    assert names == {"y on sqrt(x)", "y on 1/x"}
    assert st.runner_up.first_share >= 0.2
    assert st.runner_up.basis == RUNNER_UP_FIRST
    assert math.isclose(st.share + st.runner_up.first_share, 1.0)
    # every usable resample has one first: the shares of the listed firsts add to one
    assert math.isclose(sum(f.share for f in st.first), 1.0)
    assert any("not settled" in w for w in out.warnings)


def test_optimism_is_zero_when_the_search_space_holds_one_candidate():
    prep = _clear_log_log(seed=3)
    opts = SearchOptions(response_transforms=["log"], predictor_transforms=["log"], top=1)
    body, winner = _select(prep, opts)
    out = assess_trust(prep, opts, winner, "test", False, True, selection=body)
    op = out.optimism
    # With one candidate every inner search selects it, so the nested estimate refits the
    # same model on the same outer folds: the gap is zero up to rounding (source: the
    # definition of nested cross-validation, Stone 1974).
    assert op.outer_folds_used == op.outer_folds == opts.folds
    assert op.winner_selected == opts.folds
    assert abs(op.gap) <= 1e-12 * op.selected_cv
    assert op.ratio == pytest.approx(1.0, abs=1e-12)
    # the outer folds are the search's own partition: rank 1's error there is its CV error
    assert op.selected_cv == pytest.approx(body.winner.cv.value, rel=1e-12)
    assert op.selected_cv == pytest.approx(body.body.ranking[0].cv.value, rel=1e-12)


def test_optimism_near_zero_when_the_right_scale_always_wins_inside():
    prep = _clear_log_log(seed=4)
    body, winner = _select(prep, CLEAR_OPTS)
    op = assess_trust(prep, CLEAR_OPTS, winner, "test", False, True, selection=body).optimism
    # source: the simulation's construction: the right scale is clear on 4/5 of the rows too,
    # so every inner search picks it and nothing is flattered
    assert op.winner_selected == op.outer_folds
    assert all(f.same_as_winner and f.selected == winner for f in op.folds)
    assert abs(op.ratio - 1.0) <= 1e-12


def _noise(seed, n=60):
    """y independent of two heavy-tailed predictors: any fit chases noise."""
    rng = np.random.default_rng(seed)
    cols = {f"x{j}": np.exp(rng.normal(0.0, 0.8, n)).tolist() for j in range(2)}
    cols["y"] = (10.0 + rng.normal(0.0, 1.0, n)).tolist()
    return prepare({"columns": cols}, "y", ["x0", "x1"])


def test_optimism_positive_when_many_candidates_chase_noise():
    # Nine candidates of equal simplicity (sqrt, 1/x, x^2 of each predictor) and a response
    # unrelated to them: the winner is the luckiest of nine noisy CV estimates, so its error
    # understates that of the procedure (Varma & Simon 2006; Cawley & Talbot 2010).
    opts = SearchOptions(
        response_transforms=["identity"],
        predictor_transforms=["sqrt", "reciprocal", "square"],
        top=1,
    )
    gaps = []
    for seed in range(8):
        prep = _noise(seed)
        body, winner = _select(prep, opts)
        out = assess_trust(prep, opts, winner, "test", False, True, selection=body)
        op = out.optimism
        assert op.complete is True
        gaps.append(op.gap)
        # the warning appears exactly when the nested error is 5% above the winner's
        flattered = [w for w in out.warnings if w.startswith("The search flatters rank 1")]
        assert len(flattered) == (1 if op.ratio > OPTIMISM_WARN_RATIO else 0)
        if flattered:
            assert f"{op.nested_cv:.4g}" in flattered[0]
            assert f"{op.selected_cv:.4g}" in flattered[0]
    gaps = np.array(gaps)
    # Tolerance: without optimism a gap is as likely negative as positive.  At least 7 of 8
    # positive has probability 9/256 = 0.035 under that null (one-sided sign test), and the
    # mean must exceed two of its standard errors (one-sided t, 7 df, p ~ 0.04).
    assert np.sum(gaps > 0) >= 7
    assert gaps.mean() > 2.0 * gaps.std(ddof=1) / math.sqrt(gaps.size)


def test_trust_without_a_selection_runs_the_search_itself():
    prep = _tied_scales(n=80)
    body, winner = _select(prep, TIED_OPTS)
    a = assess_trust(prep, TIED_OPTS, winner, "test", True, False, resamples=10, selection=body)
    b = assess_trust(prep, TIED_OPTS, winner, "test", True, False, resamples=10)
    assert replace(a, elapsed_s=0.0) == replace(b, elapsed_s=0.0)
    # rank 1 as listed (values estimated on all rows) names the same candidate
    listed = body.body.ranking[0].specification
    c = assess_trust(prep, TIED_OPTS, listed, "test", True, False, resamples=10, selection=body)
    assert replace(c, elapsed_s=0.0) == replace(a, elapsed_s=0.0)


def test_time_limit_cuts_resamples_and_says_so():
    prep = _tied_scales(n=80)
    body, winner = _select(prep, TIED_OPTS)
    # the request's deadline has passed by the time trust starts
    spent = replace(TIED_OPTS, deadline=Deadline.after(1e-9))
    out = assess_trust(prep, spent, winner, "test", True, True, resamples=10, selection=body)
    st = out.stability
    assert st.not_run == 10 and st.usable == 0 and st.complete is False
    assert st.share is None and st.interval is None
    assert out.optimism.gap is None and out.optimism.problem is not None
    assert all(f.problem is not None for f in out.optimism.folds)
    assert any("could not be measured" in w for w in out.warnings)


@pytest.mark.parametrize(
    "kw,ptr",
    [
        pytest.param({"resamples": 0}, Option("trust.resamples"), id="no-resamples"),
        pytest.param({"resamples": 5000}, Option("trust.resamples"), id="too-many-resamples"),
        pytest.param({"outer_folds": 1}, Option("trust.outer_folds"), id="one-outer-fold"),
    ],
)
def test_bad_settings_point_at_the_field(kw, ptr):
    prep = _tied_scales(n=40)
    body, winner = _select(prep, TIED_OPTS)
    with pytest.raises(InputError) as err:
        assess_trust(prep, TIED_OPTS, winner, "test", True, True, selection=body, **kw)
    assert err.value.problems[0].where == ptr


def test_scale_key_ignores_values_estimated_from_the_response():
    concrete, open_, fixed = (Specification.from_dict(d) for d in _box_cox_dicts())
    assert scale_key(concrete) == scale_key(open_) != scale_key(fixed)


def test_scale_key_reads_transforms_as_written():
    # a log with a shift of 0 is written as a plain log, so it is the same candidate
    from service.core import transforms as tr
    from service.core.spec import PredictorSpec

    def spec(t: tr.Transform) -> Specification:
        return Specification("y", tr.Transform("identity"), (PredictorSpec("x", t),))

    assert scale_key(spec(tr.Transform("log", shift=0.0))) == scale_key(spec(tr.Transform("log")))
    assert scale_key(spec(tr.Transform("log", shift=1.0))) != scale_key(spec(tr.Transform("log")))


def _box_cox_dicts():
    concrete = {
        "response": {
            "column": "y",
            "transform": {"name": "box_cox", "lambda": 0.31, "estimated": True},
        },
        "predictors": [{"column": "x", "transform": {"name": "log"}}],
        "intercept": True,
    }
    open_ = {
        "response": {"column": "y", "transform": {"name": "box_cox"}},
        "predictors": [{"column": "x", "transform": {"name": "log"}}],
        "intercept": True,
    }
    fixed = {
        "response": {"column": "y", "transform": {"name": "box_cox", "lambda": 0.31}},
        "predictors": [{"column": "x", "transform": {"name": "log"}}],
        "intercept": True,
    }
    return concrete, open_, fixed


def test_estimated_predictor_powers_match_their_open_candidate():
    from service.core import transforms as tr
    from service.core.spec import PredictorSpec

    def spec(t: tr.Transform) -> Specification:
        return Specification("y", tr.Transform("log"), (PredictorSpec("x", t),))

    fitted = spec(tr.Transform("power", exponent=0.37, estimated=True))
    at_zero = spec(tr.Transform("log", shift=0.0, estimated=True))  # an estimated power of 0
    fixed = spec(tr.Transform("power", exponent=0.37))
    shifted = spec(tr.Transform("log", shift=0.5, estimated=True))  # shift from the column
    keys = [scale_key(s) for s in (fitted, at_zero, fixed, shifted)]
    assert keys[0] == keys[1] and len(set(keys)) == 3
    assert [has_estimated_power(s) for s in (fitted, at_zero, fixed, shifted)] == [
        True,
        True,
        False,
        False,
    ]
