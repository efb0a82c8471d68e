"""How terms, transformed columns and numbers are written for people."""

import numpy as np
import pytest
from service.core import transforms as tr
from service.core.data import prepare
from service.core.numbers import fmt, fmt_p, p_is
from service.core.spec import Specification, build_design, term_label
from service.selection.entries import equation


def test_numbers_rule():
    # source: product rule (one number format: 4 significant digits, trailing zeros kept,
    # plain notation without thousands separators, p-values below 1e-4 as "< 0.0001")
    assert fmt(-15934.2) == "-15930"  # never -1.593e+04
    assert fmt(0.745) == "0.7450" and fmt(0.7244) == "0.7244"
    assert fmt(1234567.8) == "1235000"
    assert fmt(0.0) == "0" and fmt(1e-20) == "1e-20"
    assert fmt(None) == "undefined" and fmt(float("nan")) == "undefined"
    assert fmt_p(3e-236) == "< 0.0001" and fmt_p(0.0312) == "0.031"
    assert p_is(1e-9) == "p < 0.0001" and p_is(0.2) == "p = 0.20"


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
        assert name == t.name and field in t.to_dict()


def test_dummy_terms_and_equation():
    rng = np.random.default_rng(3)
    n = 60
    soil = rng.choice(["clay", "loam", "sand"], n)
    x = rng.uniform(1, 10, n)
    y = 20000 - 1500 * x - 900 * (soil == "loam") + rng.normal(0, 50, n)
    prep = prepare(
        {"columns": {"y": y.tolist(), "x": x.tolist(), "soil": soil.tolist()}},
        "y",
        ["x", "soil"],
        ["soil"],
    )
    spec = Specification.from_dict(
        {
            "response": {"column": "y", "transform": {"name": "identity"}},
            "predictors": [
                {"column": "x", "transform": {"name": "identity"}},
                {"column": "soil", "transform": {"name": "categorical"}},
            ],
        }
    )
    design = build_design(spec, prep)
    assert design.names == ["intercept", "x", term_label("soil", "loam"), "soil=sand"]
    # source: numpy least squares (reference library) for the coefficients shown
    coef = np.linalg.lstsq(design.X, y, rcond=None)[0]
    eq = equation(spec, design, coef)
    assert "(soil=loam)" in eq and "[" not in eq and "e+" not in eq
    assert eq.startswith(f"y = {fmt(coef[0])} - {fmt(-coef[1])}·x")


def test_interval_words_match_the_estimate():
    # source: product rule (unsigned bounds with the estimate's word, or signed throughout)
    from service.core.interpret import _ci_text

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


def test_cautions_only_where_they_apply():
    # source: product rule (cautions that apply to the request, naming the metric used)
    from service.selection.cautions import EXTRAPOLATION, prediction_cautions, selection_cautions

    rmse = selection_cautions("rmse", True)
    assert EXTRAPOLATION not in rmse  # a selection makes no predictions
    assert any("RMSE scores the smeared mean" in c for c in rmse)
    assert any("MAE scores the median" in c for c in selection_cautions("mae", True))
    assert not any("median" in c for c in selection_cautions("rmse", False))
    assert prediction_cautions(False, True) == [EXTRAPOLATION]
    assert prediction_cautions(False, False) == []
