"""The candidate space (service/selection/candidates.py): which scales are offered, how many
candidates the space holds, the columns of the bank, and explicit requests refused rather
than changed.

References: a brute-force enumeration with itertools.product for the size of the space; numpy
for the transformed columns; build_design (the design builder the fitting uses) for the
columns and names a candidate maps onto.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from service.core import boxtidwell as bt
from service.core import transforms as tr
from service.core.bank import FoldIndex
from service.core.data import prepare
from service.core.errors import CandidateFailure, Cell, InputError, PredictorChoice, ResponseChoice
from service.core.folds import make_plan
from service.core.likelihood import fit_transform
from service.core.spec import build_design
from service.selection import candidates as cand

from tests.typed import predictors, responses


def _prep(y=None, x=None, seed=0):
    rng = np.random.default_rng(seed)
    n = 30
    x = rng.uniform(1, 9, n) if x is None else np.asarray(x, float)
    y = np.exp(0.5 + 0.2 * x + rng.normal(0, 0.1, n)) if y is None else np.asarray(y, float)
    crew = rng.choice(["day", "night", "weekend"], n)
    cols = {"y": y.tolist(), "x": x.tolist(), "crew": crew.tolist()}
    return prepare({"columns": cols}, "y", ["x", "crew"], ["crew"])


def test_default_response_scales_on_a_positive_response():
    names = [t.name for t in cand.response_candidates(_prep(), None)]
    # on y > 0 Yeo-Johnson is Box-Cox of y + 1, so only Box-Cox is offered
    assert names == ["identity", "log", "sqrt", "reciprocal", "square", "box_cox"]


def test_defaults_skip_scales_the_response_cannot_take_but_explicit_ones_are_refused():
    y = np.linspace(-2, 5, 30)  # zeros and negatives
    prep = _prep(y=y)
    names = {t.name for t in cand.response_candidates(prep, None)}
    assert names.isdisjoint({"log", "sqrt", "reciprocal", "box_cox"}) and "yeo_johnson" in names
    with pytest.raises(InputError) as exc:
        cand.response_candidates(prep, responses(["identity", "log"]))
    # first the cell of the first value log cannot take, then the transform asked for
    assert [p.where for p in exc.value.problems] == [Cell("y", 0, "columns"), ResponseChoice(1)]
    assert "used as sent" in exc.value.detail


def test_a_log_whose_shift_is_left_to_the_service_takes_zeros_and_one_sent_plainly_does_not():
    x = np.r_[0.0, np.linspace(1.0, 9.0, 29)]
    prep = _prep(x=x)
    with pytest.raises(InputError, match="used as sent"):
        cand.predictor_candidates(prep, predictors({"x": [{"name": "log"}]}))
    per = cand.predictor_candidates(prep, predictors({"x": [{"name": "log", "shift": "auto"}]}))
    # source: common practice, half the smallest positive value (log.chosen_shift)
    assert per[0] == [tr.Transform("log", shift=0.5, estimated=True)]


def test_the_bare_name_power_adds_rungs_and_an_object_asks_for_the_estimated_power():
    prep = _prep()
    per = cand.predictor_candidates(prep, predictors({"x": ["power"]}))
    assert per[0] == [
        tr.Transform("power", exponent=-0.5),
        tr.Transform("power", exponent=1.0 / 3.0),
        bt.ESTIMATED,
    ]
    assert cand.predictor_candidates(prep, predictors({"x": [{"name": "power"}]}))[0] == [
        bt.ESTIMATED
    ]
    # where a power cannot be estimated the name leaves it out, the object is refused
    few = _prep(x=[1.0, 2.0] * 15)
    assert bt.ESTIMATED not in cand.predictor_candidates(few, predictors({"x": ["power"]}))[0]
    with pytest.raises(InputError, match="estimated power of 'x' needs"):
        cand.predictor_candidates(few, predictors({"x": [{"name": "power"}]}))
    resp = cand.response_candidates(prep, responses(["power"]))
    assert resp == [tr.Transform("power", exponent=-0.5), tr.Transform("power", exponent=1.0 / 3.0)]


def test_default_predictor_options_add_an_estimated_power():
    per = cand.predictor_candidates(_prep(), None)
    assert [t.name for t in per[0]] == ["identity", "log", "sqrt", "reciprocal", "square", "power"]
    assert bt.is_open(per[0][-1])
    assert per[1] == [tr.Transform("categorical")]


def test_predictor_requests_that_cannot_apply():
    prep = _prep()
    with pytest.raises(InputError) as exc:
        cand.predictor_candidates(prep, predictors({"x": [{"name": "box_cox"}]}))
    assert exc.value.problems[0].where == PredictorChoice("x", 0)
    with pytest.raises(InputError, match="list it in 'categorical'"):
        cand.predictor_candidates(prep, predictors({"x": ["categorical"]}))


def _brute_force(resp, preds):
    count = 0
    for rt in resp:
        for ts in itertools.product(*preds):
            n_open = sum(bt.is_open(t) for t in ts)
            if rt.name in ("box_cox", "yeo_johnson") and not rt.is_fitted:
                count += n_open == 0
            else:
                count += n_open <= cand.MAX_ESTIMATED_POWERS
    return count


@pytest.mark.parametrize("n_pred", [1, 2, 3, 4])
def test_grid_size_equals_a_brute_force_count(n_pred):
    resp = [tr.Transform("identity"), tr.Transform("log", shift=0.0), tr.Transform("box_cox")]
    opts = [tr.Transform("identity"), tr.Transform("sqrt"), bt.ESTIMATED]
    preds = [opts[: 2 + (j % 2)] for j in range(n_pred)]
    # source: enumeration of every combination with itertools.product and the stated rule
    assert cand.grid_size(resp, preds) == _brute_force(resp, preds)


def test_allowed_follows_the_estimated_power_rule():
    prep = _prep()
    bc = cand.make_spec(
        prep, tr.Transform("box_cox"), [bt.ESTIMATED, tr.Transform("categorical")], True
    )
    log = cand.make_spec(
        prep, tr.Transform("log", shift=0.0), [bt.ESTIMATED, tr.Transform("categorical")], True
    )
    assert not cand.allowed(bc)  # no joint estimate with a response lambda
    assert cand.allowed(log)


def test_bank_columns_equal_the_design_builder():
    prep = _prep()
    preds = cand.predictor_candidates(prep, None)
    plan = make_plan(prep.n, 5, 1, 0)
    space = cand.build_space(prep, preds, FoldIndex.of(plan, prep.n), True)
    for t in preds[0]:
        if bt.is_open(t):
            continue
        spec = cand.make_spec(
            prep, tr.Transform("identity"), [t, tr.Transform("categorical")], True
        )
        cols, names, dyn = space.design_of(spec)
        ref = build_design(spec, prep)
        assert names == ref.names and dyn == []
        # source: build_design, the builder every full-data fit uses
        np.testing.assert_array_equal(space.bank.columns(cols), ref.X)


def test_a_column_a_transform_cannot_take_fails_that_candidate_only():
    x = np.linspace(-1, 4, 30)
    prep = _prep(x=x)
    preds = [[tr.Transform("identity"), tr.Transform("sqrt")], [tr.Transform("categorical")]]
    space = cand.build_space(prep, preds, FoldIndex.of(make_plan(30, 5), 30), True)
    good = cand.make_spec(
        prep,
        tr.Transform("identity"),
        [tr.Transform("identity"), tr.Transform("categorical")],
        True,
    )
    bad = cand.make_spec(
        prep, tr.Transform("identity"), [tr.Transform("sqrt"), tr.Transform("categorical")], True
    )
    assert space.design_of(good)[1][:2] == ["intercept", "x"]
    with pytest.raises(CandidateFailure):
        space.design_of(bad)


def test_kept_power_fits_are_the_estimate_of_the_same_inputs_and_only_of_those():
    rng = np.random.default_rng(21)
    n = 200
    x = rng.uniform(1, 10, n)
    z = 2.0 + 3.0 * np.sqrt(x) + rng.normal(0, 0.2, n)
    Xf = np.ones((n, 1))
    fits = cand.PowerFits()
    kept = fits.estimate(z, Xf, x, True)
    one = bt.estimate_powers(z, Xf, x, boxcox_form=True)
    # source: boxtidwell.estimate_powers called on the same arrays (the straightforward path)
    np.testing.assert_array_equal(kept.powers, one.powers)
    np.testing.assert_array_equal(kept.std_errors, one.std_errors)
    # a predictor given as (n, 1) is the same input as (n,); the kept fit itself comes back
    assert fits.get(z, Xf, x[:, None], True) is kept and fits.hits == 1
    # any other input is a miss: one value changed by one unit in the last place, the
    # other form, another shape of the fixed columns
    nudged = x.copy()
    nudged[7] = np.nextafter(nudged[7], np.inf)
    assert fits.get(z, Xf, nudged, True) is None
    assert fits.get(z, Xf, x, False) is None
    assert fits.get(z, np.ones((n, 2)) / 2**0.5, x, True) is None
    assert fits.get(z[::-1].copy(), Xf, x, True) is None
    assert fits.hits == 1


def test_a_kept_power_failure_is_raised_again_with_its_reason():
    n = 40
    z = np.linspace(1, 5, n)
    x = np.linspace(-1, 3, n)  # values <= 0: no power can be estimated
    fits = cand.PowerFits()
    with pytest.raises(CandidateFailure) as first:
        fits.estimate(z, np.ones((n, 1)), x, True)
    with pytest.raises(CandidateFailure) as direct:
        bt.estimate_powers(z, np.ones((n, 1)), x)
    with pytest.raises(CandidateFailure) as again:
        fits.estimate(z, np.ones((n, 1)), x, True)
    # source: the reason estimate_powers itself gives
    assert first.value.reason == direct.value.reason == again.value.reason
    assert fits.hits == 1


def test_screening_powers_keep_their_fits_for_the_search():
    prep = _prep(seed=4)
    preds = cand.predictor_candidates(prep, None)
    resp = cand.response_candidates(prep, None)
    fits = cand.PowerFits()
    info, powers = cand.screening_powers(prep, preds, resp, True, 0, None, fits)
    alone, _ = cand.screening_powers(prep, preds, resp, True, 0)
    assert info == alone and len(powers) == 5  # five fixed response scales, one open column
    # the inputs screening used: the intercept and the other predictors as sent
    lv, ref = cand.categorical_levels(prep.categorical["crew"], None, "crew")
    Xf = np.column_stack(
        [np.ones(prep.n)] + [(prep.categorical["crew"] == v) * 1.0 for v in lv if v != ref]
    )
    for t in (t for t in resp if not t.needs_lambda):
        z = fit_transform(t, prep.y).forward(prep.y)
        got = fits.get(z, Xf, prep.numeric["x"], True)
        assert got is not None and float(got.powers[0]) == powers[(t, "x")]
        one = bt.estimate_powers(z, Xf, prep.numeric["x"])
        # source: boxtidwell.estimate_powers, one call per response scale (the response
        # scales' steps are taken together; rounding-level differences only)
        assert powers[(t, "x")] == pytest.approx(float(one.powers[0]), rel=1e-9, abs=1e-11)
        assert info[(t, "x")].std_error == pytest.approx(float(one.std_errors[0]), rel=1e-7)


def test_many_kept_power_fits_keep_their_order_with_hits_misses_and_failures():
    rng = np.random.default_rng(5)
    n = 150
    x = rng.uniform(1, 10, n)
    Xf = np.ones((n, 1))
    zs = [2.0 + c * np.sqrt(x) + rng.normal(0, 0.3, n) for c in (1.0, 2.0, 3.0)]
    fits = cand.PowerFits()
    first = fits.estimate(zs[1], Xf, x, True)  # kept before the batch
    problems = [(zs[0], Xf, x), (zs[1], Xf, x), (zs[2], Xf, -x), (zs[2], Xf, x)]
    got = fits.estimate_many(problems, True)
    assert got[1] is first and fits.hits == 1
    assert isinstance(got[2], CandidateFailure)  # x <= 0
    for (z, F, xx), fit in zip(problems, got, strict=True):
        if isinstance(fit, CandidateFailure):
            continue
        # source: boxtidwell.estimate_powers on the same inputs
        want = bt.estimate_powers(z, F, xx).powers
        np.testing.assert_allclose(fit.powers, want, rtol=1e-9, atol=1e-11)
    again = fits.estimate_many(problems, True)
    assert all(a is b for a, b in zip(again, got, strict=True)) and fits.hits == 5
