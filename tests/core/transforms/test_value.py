"""Transform, the value type: equality, hashing, delegation to the family, contract form."""

from __future__ import annotations

import numpy as np
import pytest
from service.core.transforms import FAMILIES, NUMERIC_NAMES, Transform, read_back, written_alike

CONCRETE = [
    Transform("identity"),
    Transform("log", shift=0.0),
    Transform("log", shift=2.5),
    Transform("sqrt"),
    Transform("reciprocal"),
    Transform("square"),
    Transform("power", exponent=-0.5),
    Transform("power", exponent=0.25),
    Transform("box_cox", lam=0.3),
    Transform("yeo_johnson", lam=-0.4),
]
VALUES = np.array([-3.0, -2.5, -1.0, -0.0, 0.0, 1e-300, 0.5, 2.0, 7.0])


def test_the_examples_cover_every_numeric_family():
    assert {t.name for t in CONCRETE} == set(NUMERIC_NAMES)


def test_values_compare_hash_and_key_dicts_by_their_fields():
    a, b = Transform("log", shift=0.5), Transform("log", shift=0.5)
    assert a == b and hash(a) == hash(b) and {a: 1}[b] == 1
    assert Transform("log", shift=0.5, estimated=True) != a
    with pytest.raises(AttributeError):
        a.shift = 1.0  # type: ignore[misc]
    assert a.family is FAMILIES["log"]


@pytest.mark.parametrize("t", CONCRETE, ids=lambda t: t.label("x"))
def test_domain_mask_agrees_with_the_column_check(t):
    mask = t.domain_mask(VALUES)
    want = [t.domain_problem(np.array([v]), "x", "predictor") is None for v in VALUES]
    np.testing.assert_array_equal(mask, want)


@pytest.mark.parametrize("t", CONCRETE, ids=lambda t: t.label("x"))
def test_object_form_round_trips(t):
    back = read_back(t)
    if t.name == "log" and t.shift == 0.0:
        # the object form leaves a zero shift out; it reads back as a log whose shift the
        # rows decide (a model loader restores the zero, predict._transform)
        assert back == Transform("log") == written_alike(t)
    else:
        assert back == t == written_alike(t)


def test_the_estimated_mark_is_read_back_only_where_the_family_keeps_it():
    fitted = Transform("box_cox", lam=0.3, estimated=True)
    assert read_back(fitted) == fitted and written_alike(fitted) == fitted
    power = Transform("power", exponent=0.4, estimated=True)
    # the mark is written (written_alike keeps it) but a power reads back its exponent only
    assert written_alike(power) == power
    assert read_back(power) == Transform("power", exponent=0.4)
    # a field the family does not take is not written
    assert written_alike(Transform("sqrt", lam=0.5)) == Transform("sqrt")


def test_inverses_give_nan_for_every_non_finite_result():
    t = Transform("power", exponent=-0.5)
    with np.errstate(all="raise"):  # the value silences the family's floating-point warnings
        out = t.inverse(np.array([-1.0, 0.0, 1e-320]))
        slope = t.inverse_derivative(np.array([-1.0, 0.0, 1e-320]))
    assert np.isnan(out[:2]).all() and np.isnan(out[2])  # 1e-320^-2 overflows
    assert np.isnan(slope).all()


def test_open_parameters_and_counts():
    assert Transform("box_cox").needs_lambda and Transform("yeo_johnson").needs_lambda
    assert not Transform("box_cox", lam=0.5).needs_lambda and not Transform("log").needs_lambda
    assert Transform("box_cox", lam=0.5, estimated=True).n_estimated == 1
    assert Transform("log", shift=0.2, estimated=True).n_estimated == 0
