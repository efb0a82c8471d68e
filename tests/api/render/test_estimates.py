"""Contract form of an entry's fitted numbers: the coefficient table."""

import math

import numpy as np
import pytest
import statsmodels.api as sm
from service.api.encode import to_jsonable
from service.api.render import contract, renders
from service.core.fitting import CoefficientRow, Inference, hc3_cov, ols

_FIELDS = ("std_error", "t_statistic", "p_value", "ci_low", "ci_high")


def _engel():
    # source: statsmodels.datasets.engel (Koenker & Bassett 1982 household food expenditure)
    d = sm.datasets.engel.load_pandas().data
    return d.income.to_numpy(), d.foodexp.to_numpy()


def test_coefficient_rows_carry_classical_then_suffixed_robust_inference():
    x, y = _engel()
    X = sm.add_constant(x)
    fit = ols(X, y, ["intercept", "income"], True)
    rows = [contract(r) for r in fit.table(robust={"hc3": hc3_cov(fit, X)})]
    assert list(rows[1]) == ["term", "estimate", *_FIELDS, *(f"{k}_hc3" for k in _FIELDS)]
    classical = sm.OLS(y, X).fit()
    hc3 = sm.OLS(y, X).fit(cov_type="HC3", use_t=True)
    for i, row in enumerate(rows):
        # source: statsmodels OLS, classical and HC3 (t with n - p df) inference
        assert row["estimate"] == pytest.approx(classical.params[i], rel=1e-10)
        for ref, sfx in ((classical, ""), (hc3, "_hc3")):
            assert row[f"std_error{sfx}"] == pytest.approx(ref.bse[i], rel=1e-8)
            assert row[f"t_statistic{sfx}"] == pytest.approx(ref.tvalues[i], rel=1e-8)
            assert row[f"p_value{sfx}"] == pytest.approx(ref.pvalues[i], rel=1e-7, abs=1e-300)
            lo, hi = ref.conf_int(0.05)[i]
            assert (row[f"ci_low{sfx}"], row[f"ci_high{sfx}"]) == pytest.approx((lo, hi), rel=1e-8)
    assert rows[1]["term"] == "income"
    # source: CHECKS_PUBLIC engel, `foodexp on income`: const=147.47539; income=0.48517842
    assert rows[0]["estimate"] == pytest.approx(147.47539, rel=1e-7)
    assert rows[1]["estimate"] == pytest.approx(0.48517842, rel=1e-7)


def test_numbers_that_are_not_finite_are_written_as_null():
    row = CoefficientRow(
        "x",
        math.nan,
        Inference(math.inf, None, 0.5, -math.inf, 1.0),
        (("hac", Inference(*[math.nan] * 5)),),
    )
    assert renders(row)
    out = to_jsonable({"coefficients": [row]})["coefficients"][0]
    # source: the contract's rule that a number is finite or null (RFC 8259 has no NaN)
    assert out == {
        "term": "x",
        "estimate": None,
        "std_error": None,
        "t_statistic": None,
        "p_value": 0.5,
        "ci_low": None,
        "ci_high": 1.0,
        **{f"{k}_hac": None for k in _FIELDS},
    }


def test_an_exact_fit_has_no_test_and_no_interval():
    X = np.column_stack([np.ones(6), np.arange(6.0)])
    fit = ols(X, 1.0 + 2.0 * np.arange(6.0), ["intercept", "x"], True)
    out = contract(fit.table()[1])
    # source: a zero residual sum of squares leaves no standard error (t and p undefined)
    assert out["estimate"] == pytest.approx(2.0)
    if fit.rss == 0:
        assert out["p_value"] is None and out["ci_low"] is None
