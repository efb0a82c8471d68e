"""Transform families: round trips, Jacobians, inverse slopes, likelihood invariance, domains.

References used here: scipy.stats.boxcox / scipy.stats.yeojohnson (forward maps),
scipy.differentiate.derivative (numerical derivatives), statsmodels OLS (log-likelihoods).
Tolerances are fixed in advance; see the comment beside each check.
"""

from __future__ import annotations

import math
import os
import tempfile

import numpy as np
import pytest
import statsmodels.api as sm
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.configuration import set_hypothesis_home_dir
from scipy import stats
from scipy.differentiate import derivative
from service.core import transforms as tr
from service.core.fitting import ols
from service.core.likelihood import fit_transform, profile_loglik

# Keep hypothesis' cache out of the repository: a '.hypothesis' directory at the root makes
# collection warn (norecursedirs replaces pytest's defaults) and warnings are errors.
set_hypothesis_home_dir(os.path.join(tempfile.gettempdir(), "bestscale-hypothesis"))

LAMBDAS = st.floats(min_value=-2.5, max_value=2.5, allow_nan=False, allow_infinity=False)
EXPONENTS = st.one_of(
    st.floats(min_value=-3.0, max_value=-0.05), st.floats(min_value=0.05, max_value=3.0)
)
SHIFTS = st.floats(min_value=0.0, max_value=100.0)
POSITIVE = st.lists(st.floats(min_value=1e-2, max_value=1e2), min_size=1, max_size=25)
REAL = st.lists(st.floats(min_value=-1e2, max_value=1e2), min_size=1, max_size=25)
# zero, or large enough that x * x does not underflow
NONNEG = st.lists(
    st.one_of(st.just(0.0), st.floats(min_value=1e-100, max_value=1e6)), min_size=1, max_size=25
)


FAMILY_KINDS = [
    "identity",
    "log",
    "sqrt",
    "reciprocal",
    "square",
    "power",
    "box_cox",
    "yeo_johnson",
]


def test_the_property_tests_draw_every_numeric_family():
    # a family added to the registry must be added to family_and_data below
    assert sorted(FAMILY_KINDS) == sorted(tr.NUMERIC_NAMES)


@st.composite
def family_and_data(draw, away_from_zero: float = 0.0):
    """A concrete transform and values inside its domain (bounded so floats stay accurate).

    ``away_from_zero`` moves values closer to 0 than that out to +-away_from_zero (for
    numerical derivatives, whose stencils must not cross a branch point or domain edge).
    """
    kind = draw(st.sampled_from(FAMILY_KINDS))
    if kind == "identity":
        t, x = tr.Transform("identity"), np.array(draw(REAL))
    elif kind == "log":
        t, x = tr.Transform("log", shift=draw(SHIFTS)), np.array(draw(POSITIVE))
    elif kind in ("sqrt", "square"):
        t, x = tr.Transform(kind), np.array(draw(NONNEG))
    elif kind == "reciprocal":
        t, x = (
            tr.Transform(kind),
            np.array(draw(st.lists(st.floats(1e-6, 1e6), min_size=1, max_size=25))),
        )
    elif kind == "power":
        t, x = tr.Transform("power", exponent=draw(EXPONENTS)), np.array(draw(POSITIVE))
    elif kind == "box_cox":
        t, x = tr.Transform("box_cox", lam=draw(LAMBDAS)), np.array(draw(POSITIVE))
    else:
        t, x = tr.Transform("yeo_johnson", lam=draw(LAMBDAS)), np.array(draw(REAL))
    if away_from_zero:
        x = np.where(np.abs(x) < away_from_zero, np.copysign(away_from_zero, x + 0.0), x)
    return t, x


# ------------------------------------------------------------------ round trips
@settings(max_examples=200, deadline=None, derandomize=True)
@given(family_and_data())
def test_inverse_undoes_forward_for_every_family(case):
    t, x = case
    z = t.forward(x)
    assert np.all(np.isfinite(z))
    back = t.inverse(z)
    # source: definition of an inverse; tolerance rel 1e-9 (float round trip of exp/log/power on
    # values in [1e-2, 1e2], common practice), plus the cancellation of a log shift.
    scale = np.abs(x) + (t.shift or 0.0)
    np.testing.assert_allclose(back, x, rtol=1e-9, atol=1e-12 * float(np.max(scale)))


@settings(max_examples=60, deadline=None, derandomize=True)
@given(LAMBDAS, POSITIVE)
def test_box_cox_forward_equals_scipy(lam, xs):
    x = np.array(xs)
    # source: scipy.stats.boxcox(x, lmbda) = (x**lmbda - 1)/lmbda, log at 0 (reference library)
    np.testing.assert_allclose(
        tr.Transform("box_cox", lam=lam).forward(x),
        stats.boxcox(x, lmbda=lam),
        rtol=1e-9,
        atol=1e-12,
    )


@settings(max_examples=60, deadline=None, derandomize=True)
@given(LAMBDAS, REAL)
def test_yeo_johnson_forward_equals_scipy(lam, xs):
    x = np.array(xs)
    # source: scipy.stats.yeojohnson(x, lmbda), Yeo & Johnson (2000) definition
    np.testing.assert_allclose(
        tr.Transform("yeo_johnson", lam=lam).forward(x),
        stats.yeojohnson(x, lmbda=lam),
        rtol=1e-9,
        atol=1e-12,
    )


@pytest.mark.parametrize("lam", [-0.5, 0.0, 0.7, 2.0, 2.5])
def test_yeo_johnson_round_trip_at_branch_values(lam):
    # source: Yeo & Johnson (2000) inverse, both branches; lambdas at and beside the branch
    # values 0 and 2
    x = np.array([-50.0, -3.0, -1e-3, 0.0, 1e-3, 0.5, 7.0, 80.0])
    t = tr.Transform("yeo_johnson", lam=lam)
    np.testing.assert_allclose(t.inverse(t.forward(x)), x, rtol=1e-9, atol=1e-12)


# --------------------------------------------------------------- Jacobians
def _numeric_slope(f, x: np.ndarray) -> np.ndarray:
    """scipy.differentiate.derivative with steps small enough to stay on one side of 0."""
    h = 0.05 * np.maximum(np.abs(x), 1e-3)
    res = derivative(f, x, initial_step=h)
    assert np.all(res.success), "numerical derivative did not converge"
    return res.df


@settings(max_examples=100, deadline=None, derandomize=True)
@given(family_and_data(away_from_zero=0.05))
def test_log_jacobian_is_sum_of_log_abs_numerical_derivative(case):
    t, x = case
    slope = _numeric_slope(t.forward, x)
    expected = float(np.sum(np.log(np.abs(slope))))
    # source: change of variables, J = sum log|g'(y)| (Box & Cox 1964);
    # tolerance: a numerical derivative good to rel 1e-6 gives abs 1e-6 per log term.
    assert t.log_jacobian(x) == pytest.approx(expected, rel=1e-9, abs=1e-6 * x.size)


@settings(max_examples=100, deadline=None, derandomize=True)
@given(family_and_data(away_from_zero=0.05))
def test_inverse_derivative_equals_numerical_derivative_of_inverse(case):
    t, x = case
    z = t.forward(x)
    # step: a small share of the z-distance to the image of 1.1 x, so the stencil stays on the
    # branch (and inside the domain) of the inverse that holds z
    dz = np.abs(t.forward(1.1 * x) - z)
    res = derivative(t.inverse, z, initial_step=0.02 * dz)
    assert np.all(res.success), "numerical derivative did not converge"
    # source: numerical derivative of g^-1 (scipy.differentiate); tolerance rel 1e-6
    np.testing.assert_allclose(t.inverse_derivative(z), res.df, rtol=1e-6, atol=0)


# ------------------------------------------------- likelihood on the y scale
def _llf_y(z: np.ndarray, X: np.ndarray, jac: float) -> float:
    return float(sm.OLS(z, X).fit().llf) + jac


RUNGS = [
    (-1.0, tr.Transform("reciprocal")),
    (-0.5, tr.Transform("power", exponent=-0.5)),
    (0.0, tr.Transform("log", shift=0.0)),
    (0.5, tr.Transform("sqrt")),
    (1.0, tr.Transform("identity")),
    (2.0, tr.Transform("square")),
]


@settings(max_examples=15, deadline=None, derandomize=True)
@given(st.integers(min_value=0, max_value=2**31 - 1))
def test_box_cox_rung_and_named_power_give_equal_y_scale_likelihood(seed):
    rng = np.random.default_rng(seed)
    n = 40
    x = rng.uniform(1, 5, n)
    X = np.column_stack([np.ones(n), x])
    y = np.exp(0.5 + 0.3 * x + rng.normal(0, 0.2, n))
    for lam, named in RUNGS:
        bc = tr.Transform("box_cox", lam=lam)
        # source: Box & Cox (1964): Box-Cox(-1) and -1/y (likewise every ladder rung and its
        # named power) differ by an affine map a g + b, whose n log|a| the Box-Cox Jacobian
        # already carries, so the y-scale likelihoods agree; z-scale llf from statsmodels;
        # tolerance rel 1e-9.
        l_named = _llf_y(named.forward(y), X, named.log_jacobian(y))
        l_bc = _llf_y(stats.boxcox(y, lmbda=lam), X, (lam - 1.0) * float(np.sum(np.log(y))))
        assert l_named == pytest.approx(l_bc, rel=1e-9), named.name
        assert profile_loglik("box_cox", y, X, lam) == pytest.approx(l_bc, rel=1e-9)
        assert bc.log_jacobian(y) == pytest.approx((lam - 1.0) * np.sum(np.log(y)), rel=1e-12)


def test_standardised_log_with_n_log_a_equals_plain_log():
    rng = np.random.default_rng(11)
    n = 50
    x = rng.uniform(0, 3, n)
    X = np.column_stack([np.ones(n), x])
    y = np.exp(1.0 + 0.4 * x + rng.normal(0, 0.3, n))
    t = tr.Transform("log", shift=0.0)
    z = t.forward(y)
    a = 1.0 / float(np.std(z))
    zs = a * (z - z.mean())
    fit_plain = ols(X, z, ["c", "x"], True)
    fit_std = ols(X, zs, ["c", "x"], True)
    # source: affine invariance of the y-scale likelihood: a standardised log (adding n log a)
    # equals the plain log
    assert fit_std.llf + t.log_jacobian(y) + n * math.log(a) == pytest.approx(
        fit_plain.llf + t.log_jacobian(y), rel=1e-9
    )
    # and our z-scale llf is statsmodels' (tolerance: independent implementation, rel 1e-7)
    assert fit_plain.llf == pytest.approx(sm.OLS(z, X).fit().llf, rel=1e-7)


# ------------------------------------------------------------------ domains
NEG = np.array([3.0, -1.5, 2.0, 4.0])
ZERO = np.array([3.0, 0.0, 2.0, 4.0])
POS = np.array([3.0, 0.5, 2.0, 4.0])


@pytest.mark.parametrize(
    "t, x, minimum, fixes",
    [
        pytest.param(tr.Transform("log"), NEG, "-1.5", ["yeo_johnson", "shift"], id="log-negative"),
        pytest.param(
            tr.Transform("log", shift=0.0),
            ZERO,
            "0",
            ["yeo_johnson", "shift"],
            id="log-shift0-zero",
        ),
        pytest.param(
            tr.Transform("log", shift=1.0),
            np.array([3.0, -2.0]),
            "-2",
            ["yeo_johnson", "shift"],
            id="log-shift-too-small",
        ),
        pytest.param(tr.Transform("sqrt"), NEG, "-1.5", ["yeo_johnson"], id="sqrt-negative"),
        pytest.param(tr.Transform("square"), NEG, "-1.5", ["yeo_johnson"], id="square-negative"),
        pytest.param(
            tr.Transform("power", exponent=0.5), NEG, "-1.5", ["yeo_johnson"], id="power+-negative"
        ),
        pytest.param(
            tr.Transform("power", exponent=-0.5),
            ZERO,
            "0",
            ["yeo_johnson", "log"],
            id="power--zero",
        ),
        pytest.param(
            tr.Transform("reciprocal"), ZERO, "0", ["yeo_johnson", "log"], id="reciprocal-zero"
        ),
        pytest.param(
            tr.Transform("reciprocal"), NEG, "-1.5", ["yeo_johnson"], id="reciprocal-negative"
        ),
        pytest.param(tr.Transform("box_cox"), ZERO, "0", ["yeo_johnson", "log"], id="box_cox-zero"),
        pytest.param(
            tr.Transform("box_cox", lam=0.5), NEG, "-1.5", ["yeo_johnson"], id="box_cox-negative"
        ),
    ],
)
def test_domain_message_names_column_value_and_fix(t, x, minimum, fixes):
    msg = t.domain_problem(x, "cost", "response")
    assert msg is not None
    # source: common practice for validation messages: the fact, the offending value, the fix
    assert "'cost'" in msg and minimum in msg
    for word in fixes:
        assert word in msg


@pytest.mark.parametrize(
    "t, x",
    [
        pytest.param(tr.Transform("yeo_johnson"), NEG, id="yeo_johnson-any"),
        pytest.param(tr.Transform("identity"), NEG, id="identity-any"),
        pytest.param(tr.Transform("log"), ZERO, id="log-zero-gets-shift"),
        pytest.param(tr.Transform("sqrt"), ZERO, id="sqrt-zero"),
        pytest.param(tr.Transform("power", exponent=0.5), ZERO, id="power+-zero"),
    ]
    + [
        pytest.param(tr.Transform(n, **kw), POS, id=f"{n}-positive")
        for n, kw in [
            ("log", {}),
            ("sqrt", {}),
            ("reciprocal", {}),
            ("square", {}),
            ("box_cox", {}),
            ("power", {"exponent": -2.0}),
        ]
    ],
)
def test_no_domain_problem_inside_the_domain(t, x):
    assert t.domain_problem(x, "cost", "response") is None


def test_log_of_zeros_gets_half_the_smallest_positive_shift():
    # source: common practice for log(y + c) with zeros: c = half the smallest y > 0
    t = fit_transform(tr.Transform("log"), np.array([0.0, 0.4, 2.0, 0.0, 5.0]))
    assert t.shift == pytest.approx(0.2) and t.estimated
    assert np.all(np.isfinite(t.forward(np.array([0.0, 0.4]))))


@pytest.mark.parametrize(
    "t, label",
    [
        (tr.Transform("log"), "log(x)"),
        (tr.Transform("sqrt"), "sqrt(x)"),
        (tr.Transform("reciprocal"), "1/x"),
        (tr.Transform("square"), "x^2"),
        (tr.Transform("log", shift=3.0), "log(x, shift=3)"),
        (tr.Transform("power", exponent=0.5), "power(x, exponent=0.5)"),
        (tr.Transform("box_cox", lam=-0.0050614), "box_cox(x, lambda=-0.005061)"),
        (tr.Transform("yeo_johnson", lam=0.5), "yeo_johnson(x, lambda=0.5)"),
        (tr.Transform("box_cox"), "box_cox(x, lambda=estimated)"),
    ],
)
def test_transform_labels_use_api_names_and_fields(t, label):
    # source: product rule (parameter-free transforms in ordinary notation, the others as
    # API name(column, field=value))
    assert t.label("x") == label
    if "=" in label and "estimated" not in label:
        name = label.split("(")[0]
        field = label.split(", ")[1].split("=")[0]
        assert name == t.name and field in [p.field for p in t.family.parameters]


# ------------------------------------------------- domain masks and their wording
def _stated(text: str, x: np.ndarray) -> np.ndarray:
    """The inequality a domain phrase states (``values > -2.5``), evaluated on ``x``."""
    if text == "values where it is finite":
        return np.ones(x.shape, bool)
    _, op, bound = text.split()
    return x > float(bound) if op == ">" else x >= float(bound)


@settings(max_examples=200, deadline=None, derandomize=True)
@given(family_and_data(), st.lists(st.floats(-1e3, 1e3), min_size=1, max_size=20))
def test_domain_mask_is_what_the_domain_text_states(case, extra):
    t, inside = case
    x = np.concatenate([inside, extra, [0.0, -0.0]])
    mask = t.domain_mask(x)
    # source: the phrase the messages use is the statement of the domain (one wording)
    np.testing.assert_array_equal(mask, _stated(t.domain_text(), x))
    # values drawn inside the family's domain are inside the mask
    assert mask[: len(inside)].all()
    # and inside the mask the forward map is finite (these values do not overflow)
    with np.errstate(all="ignore"):
        assert np.all(np.isfinite(t.forward(x[mask & (np.abs(x) > 1e-100)])))
