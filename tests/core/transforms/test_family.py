"""The family interface: domains (mask and wording from one value), parameter accessors."""

from __future__ import annotations

import inspect

import numpy as np
import pytest
from service.core.transforms import FAMILIES, Family
from service.core.transforms.family import (
    EVERYWHERE,
    NON_NEGATIVE,
    POSITIVE,
    Domain,
    LambdaFamily,
    exponent_of,
    lam_of,
)
from service.core.transforms.value import Transform

X = np.array([-np.inf, -3.0, -2.5, -1e-300, -0.0, 0.0, 1e-300, 0.5, 2.0, np.inf])


def _statement(d: Domain, x: np.ndarray) -> np.ndarray:
    """Read the phrase ``values OP BOUND`` as the inequality it states."""
    words = d.text.split()
    assert words[0] == "values"
    op, bound = words[1], float(words[2])
    # source: definition of the inequalities the phrase names
    return x > bound if op == ">" else x >= bound


@pytest.mark.parametrize(
    "d", [NON_NEGATIVE, POSITIVE, Domain(-2.5, True), Domain(2.5, False), Domain(-0.0, True)]
)
def test_mask_is_what_the_text_states(d):
    np.testing.assert_array_equal(d.mask(X), _statement(d, X))


@pytest.mark.parametrize(
    "d, text, breach",
    [
        (NON_NEGATIVE, "values >= 0", "has negative values"),
        (POSITIVE, "values > 0", "has values <= 0"),
        (Domain(-2.5, True), "values > -2.5", "has values <= -2.5"),
        (Domain(-0.0, True), "values > 0", "has values <= 0"),  # a zero shift reads as 0
        (Domain(1000.0, False), "values >= 1000", "has values < 1000"),
    ],
)
def test_one_wording_of_a_domain(d, text, breach):
    # source: product rule (one sentence per domain, the offending fact in words)
    assert d.text == text
    assert d.breach == breach


def test_everywhere_takes_every_value_and_says_where_it_can_fail():
    assert EVERYWHERE.mask(X).all()
    assert EVERYWHERE.text == "values where it is finite"


def test_a_missing_value_is_not_judged_by_the_domain():
    # nan is a missing value, reported by the intake before any transform is applied
    assert POSITIVE.mask(np.array([np.nan, -1.0])).tolist() == [True, False]


def test_parameters_that_are_not_there_are_refused_with_a_clear_error():
    with pytest.raises(ValueError, match="has no lambda yet; fit it first"):
        lam_of(Transform("box_cox"))
    with pytest.raises(ValueError, match="has no exponent"):
        exponent_of(Transform("power"))
    assert lam_of(Transform("yeo_johnson", lam=0.5)) == 0.5
    assert exponent_of(Transform("power", exponent=-0.5)) == -0.5


def test_every_registered_family_implements_the_whole_interface():
    abstract = {n for n, v in inspect.getmembers(Family) if getattr(v, "__isabstractmethod__", 0)}
    assert abstract >= {"forward", "inverse", "domain", "label", "log_jacobian"}
    for name, fam in FAMILIES.items():
        assert fam.name == name
        missing = [m for m in abstract if getattr(type(fam), m) is getattr(Family, m)]
        assert not missing, (name, missing)


def test_lambda_families_read_tiny_lambdas_as_the_log():
    # source: the floor PARAM_FLOOR (1e-3) is a design choice; lambda 0 is the log (Box & Cox 1964)
    for name in (n for n, f in FAMILIES.items() if isinstance(f, LambdaFamily)):
        assert Transform(name, lam=4e-4).lam == 0.0
        assert Transform(name, lam=-4e-4).lam == 0.0
        assert Transform(name, lam=2e-3).lam == 2e-3
