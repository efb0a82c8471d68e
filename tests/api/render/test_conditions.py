"""Contract form of the regression conditions and transform hints, on data statsmodels ships
(Brownlee's stack loss plant data, statsmodels.datasets.stackloss), with every rendered
statistic put next to the statsmodels or scipy function that computes it."""

import json

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from service.api.encode import to_jsonable
from service.api.render import contract, renders
from service.core import _condition_tests as ct
from service.core.conditions import (
    CONDITION_NAMES,
    ConditionInputs,
    assess_conditions,
)
from service.core.spec import TermInfo
from statsmodels.stats import diagnostic as smd
from statsmodels.stats.outliers_influence import OLSInfluence, variance_inflation_factor
from statsmodels.stats.stattools import jarque_bera

PREDICTORS = ("AIRFLOW", "WATERTEMP", "ACIDCONC")


@pytest.fixture(scope="module")
def stackloss():
    # source: statsmodels.datasets.stackloss (Brownlee 1965), 21 rows in the loader's order
    d = sm.datasets.stackloss.load_pandas().data
    y = d["STACKLOSS"].to_numpy(float)
    X = np.column_stack([np.ones(len(d)), d[list(PREDICTORS)].to_numpy(float)])
    terms = tuple(
        TermInfo(name, "numeric", (j + 1,), X[:, j + 1], name) for j, name in enumerate(PREDICTORS)
    )
    inp = ConditionInputs(y, X, True, terms, np.arange(1, len(d) + 1), np.arange(len(d)), 0.05)
    report = assess_conditions(inp)
    return y, X, sm.OLS(y, X).fit(), report, to_jsonable(report)


def _test(block, condition, start):
    return next(t for t in block[condition]["tests"] if t["name"].startswith(start))


def test_the_block_lists_the_six_conditions_in_order_and_is_json(stackloss):
    *_, report, block = stackloss
    assert renders(report) and tuple(block) == CONDITION_NAMES
    assert contract(report) == block
    json.dumps(block, allow_nan=False)
    for name in CONDITION_NAMES:  # the rows have an order: every condition is tested
        assert list(block[name])[:4] == ["holds", "tests", "note", "rule"]
        assert block[name]["holds"] in (True, False, None)


def test_rendered_statistics_equal_statsmodels_and_scipy(stackloss):
    _, X, res, _, block = stackloss
    bp = _test(block, "equal_variance", "Breusch-Pagan")
    # source: statsmodels het_breuschpagan, Koenker's studentised form (robust=True)
    lm, lm_p, f, f_p = smd.het_breuschpagan(res.resid, X, robust=True)
    assert bp["statistic"] == pytest.approx(lm, rel=1e-8)
    assert bp["p_value"] == pytest.approx(lm_p, rel=1e-8)
    assert bp["f_statistic"] == pytest.approx(f, rel=1e-8)
    assert bp["f_p_value"] == pytest.approx(f_p, rel=1e-8)
    assert bp["df"] == 3.0 and bp["robust"] is True and bp["primary"] is True
    reset = _test(block, "linearity", "Ramsey RESET")
    # source: statsmodels linear_reset, fitted^2 and fitted^3, F form
    ref = smd.linear_reset(res, power=3, test_type="fitted", use_f=True)
    assert reset["statistic"] == pytest.approx(float(ref.fvalue), rel=1e-8)
    assert reset["p_value"] == pytest.approx(float(ref.pvalue), rel=1e-8)
    assert reset["df"] == [2.0, 15.0] and reset["powers"] == [2, 3]
    bg = _test(block, "independence", "Breusch-Godfrey")
    # source: statsmodels acorr_breusch_godfrey at the rendered lag order
    bg_ref = smd.acorr_breusch_godfrey(res, nlags=bg["lags"], result_object=True)
    assert bg["lags"] == ct.breusch_godfrey_lags(21) == 1 and isinstance(bg["lags"], int)
    assert bg["statistic"] == pytest.approx(bg_ref.lm, rel=1e-8)
    assert bg["p_value"] == pytest.approx(bg_ref.lmpval, rel=1e-8)
    assert bg["f_statistic"] == pytest.approx(bg_ref.fval, rel=1e-8)
    jb = _test(block, "normality", "Jarque-Bera")
    # source: statsmodels jarque_bera (statistic, p-value, skewness, kurtosis)
    jb_ref = jarque_bera(res.resid)
    assert [jb["statistic"], jb["p_value"], jb["skewness"], jb["kurtosis"]] == pytest.approx(
        [float(v) for v in jb_ref], rel=1e-8
    )
    assert jb["df"] == 2.0
    sw = _test(block, "normality", "Shapiro-Wilk")
    # source: scipy.stats.shapiro
    w = stats.shapiro(res.resid)
    assert sw["statistic"] == pytest.approx(w.statistic, rel=1e-8)
    assert sw["p_value"] == pytest.approx(w.pvalue, rel=1e-8)
    assert sw["primary"] is True and jb["primary"] is False
    dw = _test(block, "independence", "Durbin-Watson")
    # source: statsmodels durbin_watson; it gives no p-value, neither do we
    assert dw["statistic"] == pytest.approx(sm.stats.durbin_watson(res.resid), rel=1e-10)
    assert dw["p_value"] is None and dw["common_practice_range"] == [1.5, 2.5]


def test_rendered_vif_rows_equal_statsmodels(stackloss):
    _, X, _, _, block = stackloss
    mc = block["multicollinearity"]
    assert [r["term"] for r in mc["vif"]] == list(PREDICTORS)
    for j, row in enumerate(mc["vif"], start=1):
        # source: statsmodels variance_inflation_factor (design with the intercept column)
        assert row["vif"] == pytest.approx(variance_inflation_factor(X, j), rel=1e-8)
        assert row["gvif"] == pytest.approx(row["vif"], rel=1e-12)  # one column: GVIF = VIF
        assert row["gvif_adjusted"] == pytest.approx(row["vif"] ** 0.5, rel=1e-12)
        assert row["df"] == 1 and isinstance(row["df"], int)
        assert row["level"] == "ok"  # common practice: below 5
    largest = _test(block, "multicollinearity", "Largest variance")
    assert largest["statistic"] == max(r["vif"] for r in mc["vif"])
    assert largest["threshold"] == {"warn": 5.0, "fail": 10.0}
    cond = _test(block, "multicollinearity", "Condition number")
    # source: numpy.linalg.cond of the unit-length columns (Belsley, Kuh & Welsch 1980)
    assert cond["statistic"] == pytest.approx(
        np.linalg.cond(X / np.linalg.norm(X, axis=0)), rel=1e-8
    )
    assert mc["condition_number"] == cond["statistic"]
    assert cond["condition_indices"][0] == pytest.approx(1.0)


def test_rendered_influence_equals_statsmodels(stackloss):
    _, _, res, _, block = stackloss
    inf = OLSInfluence(res)  # source: statsmodels OLSInfluence
    cooks, hat = inf.cooks_distance[0], inf.hat_matrix_diag
    dffits, student = inf.dffits[0], inf.resid_studentized_external
    cook = _test(block, "influence", "Cook's")
    assert cook["statistic"] == pytest.approx(cooks.max(), rel=1e-8)
    assert cook["row"] == int(np.argmax(cooks)) + 1  # rows are numbered from 1
    assert cook["threshold"] == {"flag": pytest.approx(4 / 21), "fail": 1.0}
    lev = _test(block, "influence", "Leverage")
    assert lev["statistic"] == pytest.approx(hat.max(), rel=1e-8)
    assert lev["threshold"] == pytest.approx(2 * 4 / 21)  # common practice: 2p/n
    outlier = _test(block, "influence", "Outlier test")
    assert outlier["statistic"] == pytest.approx(np.abs(student).max(), rel=1e-8)
    assert outlier["df"] == 16.0
    # source: Bonferroni: n times the two-sided t tail of the largest |t_i| on n - p - 1 df
    p = min(1.0, 21 * 2 * stats.t.sf(np.abs(student).max(), 16))
    assert outlier["p_value"] == pytest.approx(p, rel=1e-8)
    infl = block["influence"]
    assert set(infl) == {
        "holds",
        "tests",
        "note",
        "rule",
        "flagged_rows",
        "n_flagged",
        "flagged_rows_truncated",
        "thresholds",
    }
    assert infl["n_flagged"] == len(infl["flagged_rows"]) and not infl["flagged_rows_truncated"]
    assert infl["thresholds"]["cooks_flag"] == pytest.approx(4 / 21)
    for row in infl["flagged_rows"]:
        i = row["row"] - 1
        assert row["cooks_distance"] == pytest.approx(cooks[i], rel=1e-8)
        assert row["leverage"] == pytest.approx(hat[i], rel=1e-8)
        assert row["dffits"] == pytest.approx(dffits[i], rel=1e-8)
        assert row["studentized_residual"] == pytest.approx(student[i], rel=1e-8)
        assert row["reasons"] and all(isinstance(r, str) for r in row["reasons"])
    # the flagged rows: some cut-off exceeded, largest Cook's distance first
    over = (cooks > 4 / 21) | (hat > 8 / 21) | (np.abs(dffits) > 2 * np.sqrt(4 / 21))
    over |= np.abs(student) > 3
    assert sorted(r["row"] - 1 for r in infl["flagged_rows"]) == np.flatnonzero(over).tolist()
    assert infl["flagged_rows"][0]["row"] == cook["row"]


def test_a_test_lists_what_describes_it_then_what_it_produced(stackloss):
    *_, block = stackloss
    assert list(_test(block, "linearity", "Ramsey RESET")) == [
        "name",
        "statistic",
        "p_value",
        "powers",
        "form",
        "source",
        "df",
        "primary",
    ]
    assert list(_test(block, "independence", "Breusch-Godfrey")) == [
        "name",
        "statistic",
        "p_value",
        "lags",
        "source",
        "df",
        "f_statistic",
        "f_p_value",
        "primary",
    ]
    curve = _test(block, "linearity", "Curvature of partial residuals: AIRFLOW")
    assert (curve["column"], curve["label"]) == ("AIRFLOW", "AIRFLOW")
    assert isinstance(curve["curvature_sign"], int) and isinstance(curve["df"], float)


def test_a_test_that_could_not_run_gives_its_reason_and_no_by_products():
    # three rows, two coefficients: one residual degree of freedom
    x = np.array([1.0, 2.0, 4.0])
    inp = ConditionInputs(
        np.array([1.0, 3.0, 2.0]),
        np.column_stack([np.ones(3), x]),
        True,
        (TermInfo("x", "numeric", (1,), x, "x"),),
        np.arange(1, 4),
        np.arange(3),
    )
    block = to_jsonable(assess_conditions(inp))
    reset = _test(block, "linearity", "Ramsey RESET")
    assert reset["statistic"] is None and reset["reason"]
    assert "df" not in reset and reset["powers"] == [2, 3]
    assert block["linearity"]["holds"] is None
    lb = _test(block, "independence", "Ljung-Box")
    assert lb["reason"] == "Ljung-Box needs at least 5 rows" and lb["df"] == 0.0


def test_influence_that_cannot_be_measured_renders_without_cut_offs():
    x = np.arange(1.0, 9.0)
    inp = ConditionInputs(
        3 + 2 * x,  # an exact fit: no residuals to measure influence by
        np.column_stack([np.ones(8), x]),
        True,
        (TermInfo("x", "numeric", (1,), x, "x"),),
        np.arange(1, 9),
        None,
    )
    block = contract(assess_conditions(inp))
    assert block["influence"] == {
        "holds": None,
        "tests": [],
        "note": "Not assessed: the residuals are all zero (the model fits the data exactly).",
        "rule": block["influence"]["rule"],
        "flagged_rows": [],
        "n_flagged": 0,
    }
    # rows without an order: nothing tested, the rule first, then why
    assert list(block["independence"]) == ["holds", "tests", "rule", "note"]
    assert block["independence"]["holds"] is None and block["independence"]["tests"] == []
    assert "how the data were collected" in block["independence"]["note"]


def test_transform_hints_render_with_the_bulging_rule_reading():
    # source: Tukey (1977); Mosteller & Tukey (1977): y = sqrt(x) bulges up-left, so x moves
    # down the ladder (common practice)
    rng = np.random.default_rng(21)
    x = rng.uniform(0.5, 4, 200)
    y = np.sqrt(x) + rng.normal(0, 0.005, 200)
    inp = ConditionInputs(
        y,
        np.column_stack([np.ones(200), x]),
        True,
        (TermInfo("x", "numeric", (1,), x, "x"),),
        np.arange(1, 201),
        None,
    )
    (hint,) = to_jsonable(list(assess_conditions(inp).hints))
    assert list(hint) == [
        "column",
        "label",
        "slope_sign",
        "curvature_sign",
        "bulge",
        "x_direction",
        "y_direction",
        "p_value",
        "monotone",
        "sentence",
    ]
    assert (hint["bulge"], hint["x_direction"], hint["y_direction"]) == ("up-left", "down", "up")
    assert (hint["slope_sign"], hint["curvature_sign"], hint["monotone"]) == (1, -1, True)
    # the hint's p-value is the t-test of the centred square added to the model
    c = (x - x.mean()) / x.std()
    ref = sm.OLS(y, np.column_stack([np.ones(200), x, c**2])).fit()  # source: statsmodels OLS
    assert hint["p_value"] == pytest.approx(float(ref.pvalues[2]), rel=1e-6, abs=1e-300)
