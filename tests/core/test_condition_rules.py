"""How regression conditions enter the ranking (service/core/condition_rules.py).

References: the Bonferroni rule (a condition counts against a candidate only when its
smallest p-value is below alpha over the number of conditions tested); statsmodels
het_breuschpagan for the block built from a real fit (engel data as statsmodels ships them).
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from service.core import transforms as tr
from service.core.condition_rules import (
    CONDITION_NAMES,
    condition_inputs,
    conditions_for,
    failed,
    failed_for_ranking,
)
from service.core.data import prepare
from service.core.fitting import ols
from service.core.spec import PredictorSpec, Specification, build_design
from statsmodels.stats import diagnostic as smd


def _block(**conds):
    out = {c: {"holds": True, "tests": []} for c in CONDITION_NAMES}
    out.update(conds)
    return out


def test_a_failure_counts_only_below_the_bonferroni_level():
    # six conditions tested, alpha 0.05: the level is 0.05 / 6 = 0.00833
    weak = _block(normality={"holds": False, "tests": [{"p_value": 0.02}]})
    strong = _block(normality={"holds": False, "tests": [{"p_value": 0.008}]})
    assert failed(weak) == ["normality"]
    # source: Bonferroni over the conditions tested (0.02 > 0.05/6 > 0.008)
    assert failed_for_ranking(weak, 0.05) == []
    assert failed_for_ranking(strong, 0.05) == ["normality"]
    # fewer conditions tested: a higher level, so 0.02 counts when only two were tested
    two = {
        "normality": {"holds": False, "tests": [{"p_value": 0.02}]},
        "linearity": {"holds": True, "tests": []},
    }
    assert failed_for_ranking(two, 0.05) == ["normality"]


def test_threshold_conditions_count_whenever_they_fail():
    block = _block(multicollinearity={"holds": False, "tests": [{"p_value": None}]})
    assert failed_for_ranking(block, 0.05) == ["multicollinearity"]
    assert failed(None) == [] and failed_for_ranking({}, 0.05) == []


def test_conditions_for_a_real_fit():
    d = sm.datasets.engel.load_pandas().data  # source: statsmodels.datasets.engel
    prep = prepare(
        {"columns": {"food": d.foodexp.tolist(), "income": d.income.tolist()}}, "food", ["income"]
    )
    spec = Specification(
        "food", tr.Transform("identity"), (PredictorSpec("income", tr.Transform("identity")),)
    )
    design = build_design(spec, prep)
    fit = ols(design.X, prep.y, design.names, True)
    block, hints = conditions_for(design, fit, prep, prep.y, 0.05)
    assert tuple(block) == CONDITION_NAMES and isinstance(hints, list)
    bp = next(t for t in block["equal_variance"]["tests"] if t["name"].startswith("Breusch-Pagan"))
    # source: statsmodels het_breuschpagan (Koenker's studentised form) on the same fit;
    # CHECKS_PUBLIC engel `foodexp on income`: LM 109.263
    lm = smd.het_breuschpagan(fit.resid, design.X, robust=True)[0]
    assert bp["statistic"] == pytest.approx(lm, rel=1e-8)
    assert bp["statistic"] == pytest.approx(109.263, rel=1e-5)
    assert "equal_variance" in failed_for_ranking(block, 0.05)
    inp = condition_inputs(design, fit, prep, prep.y, 0.01)
    assert inp.alpha == 0.01 and np.array_equal(inp.X, design.X)
