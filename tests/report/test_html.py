"""The HTML report (service/report/html.py): number writing, escaping, words for scales,
inlined figures and a whole page from a selection response.

References: Python's html.escape and xml.etree (a page that parses as XML is well-formed);
matplotlib's SVG backend for a real figure to inline; the definition of rounding to 4
significant digits.
"""

from __future__ import annotations

import io
import json
import re
import xml.etree.ElementTree as ET
from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt
import pytest
from hypothesis import given
from hypothesis import strategies as st
from service.core.conditions import CONDITION_NAMES
from service.report.html import (
    CONDITIONS,
    ConditionWords,
    _box_cox_cell,
    inline_svg,
    num,
    pval,
    render_report,
    spec_words,
    transform_words,
)
from service.report.svg import esc

from tests.browser.report_case import demo_report

# 4 significant digits: the rounding error is at most half a unit in the 4th digit
FOUR_DIGITS = 5.0001e-4


@given(st.floats(min_value=-1e300, max_value=1e300, allow_nan=False).filter(lambda v: v != 0))
def test_number_format_keeps_four_significant_digits(v):
    # source: definition of rounding to 4 significant digits
    text = num(v)
    assert float(text.replace(",", "")) == pytest.approx(v, rel=FOUR_DIGITS)
    digits = re.sub(r"e.*$", "", text).replace(",", "").replace("-", "").replace(".", "")
    assert len(digits.strip("0")) <= 4


def test_missing_numbers_are_a_dash_and_small_p_values_escaped():
    assert num(None) == num(float("nan")) == "\u2013"
    assert pval(3e-12) == "&lt; 0.0001" and pval(0.04321) == "0.043" and pval(None) == "\u2013"


@pytest.mark.parametrize(
    "t, words",
    [
        (None, '<span class="col">c</span>'),
        ({"name": "log", "shift": 0.5}, 'log of (<span class="col">c</span> + 0.5000)'),
        ({"name": "power", "exponent": -0.5}, '<span class="col">c</span> to the power -0.5000'),
        (
            {"name": "box_cox", "lambda": 0.25, "estimated": True},
            'Box-Cox transform of <span class="col">c</span> (\u03bb = 0.2500, estimated)',
        ),
        (
            {"name": "categorical"},
            '<span class="col">c</span> (categories, baseline clay)',
        ),
    ],
)
def test_transform_words(t, words):
    assert transform_words(t, "c", reference="clay") == words


def test_spec_words_join_predictors_and_say_no_intercept():
    spec = {
        "response": {"column": "y", "transform": {"name": "sqrt"}},
        "predictors": [{"column": "a"}, {"column": "b"}, {"column": "<c>"}],
        "intercept": False,
    }
    text = spec_words(spec)
    assert text.startswith('square root of <span class="col">y</span> on ')
    assert ", " in text and " and " in text and "&lt;c&gt;" in text
    assert text.endswith(", without an intercept")


def test_inlined_matplotlib_svg_has_prefixed_ids_and_no_prolog():
    fig, ax = plt.subplots(figsize=(2, 2))
    ax.plot([0, 1], [1, 0])
    buf = io.StringIO()
    fig.savefig(buf, format="svg")  # source: matplotlib SVG backend
    plt.close(fig)
    out = inline_svg(buf.getvalue(), "fig1", "A <test> figure")
    assert not out.startswith("<?xml") and "<metadata>" not in out and "xlink:href" not in out
    root = ET.fromstring(out)  # source: Python's XML parser (well-formed)
    ids = [e.get("id") for e in root.iter() if e.get("id")]
    assert ids and all(i.startswith("fig1-") for i in ids)
    assert root.find("title").text == "A <test> figure"
    refs = re.findall(r'href="#([^"]+)"', out) + re.findall(r"url\(#([^)]+)\)", out)
    assert all(r in ids for r in refs)  # every reference points at an id of this figure
    with pytest.raises(ValueError, match="not an SVG"):
        inline_svg("<html></html>", "p", "x")


def test_inlined_figure_has_one_title_and_prefixed_ids():
    import numpy as np
    from service.core.conditions import ConditionInputs
    from service.core.plots import diagnostic_plots
    from service.core.spec import TermInfo
    from service.report.figures import render_figure

    x = np.linspace(1.0, 10.0, 30)
    z = 1.0 + x + np.random.default_rng(2).normal(0, 0.3, 30)
    z[1] += 8.0  # row 2 (rows are numbered from 1) stands out and is labelled
    X = np.column_stack([np.ones(30), x])
    terms = (TermInfo("x", "numeric", (1,), x, "x"),)
    plots = diagnostic_plots(ConditionInputs(z, X, True, terms, np.arange(1, 31), None))
    assert plots.residuals_fitted.labels[0].row == 2
    out = inline_svg(render_figure(plots, "svg", title="y on x"), "f1", "Panels for y on x")
    root = ET.fromstring(out)  # source: Python's XML parser (well-formed)
    titles = [e for e in root.iter() if e.tag == "title"]
    assert [t.text for t in titles] == ["Panels for y on x"]  # the figure's own is replaced
    ids = [e.get("id") for e in root.iter() if e.get("id")]
    assert "f1-panel-straight" in ids and "f1-row-label-straight-2" in ids
    assert all(i.startswith("f1-") for i in ids)


def test_a_whole_page_from_a_selection_body_is_well_formed():
    _, body = demo_report()
    page = render_report(body, None, {"response": "repair_cost"})
    root = ET.fromstring(page.split("\n", 1)[1])  # source: Python's XML parser
    text = "".join(root.itertext())
    assert "repair_cost" in text and "Cautions" in text
    first = body["ranking"][0]
    assert num(first["cv"]["value"]) in text  # the page shows the response's numbers
    for caution in body["cautions"]:
        assert esc(caution) in page


def test_the_page_names_the_conditions_an_entry_carries_in_their_order():
    _, body = demo_report()
    # the conditions a ranking entry carries, in the order the contract lists them
    assert [w.name for w in ConditionWords] == list(body["ranking"][0]["conditions"])
    assert [c[0] for c in CONDITIONS] == list(CONDITION_NAMES)
    page = render_report(body, None, {"response": "repair_cost"})
    for _, heading, short in CONDITIONS:
        assert esc(heading) in page and esc(short) in page


def _summary_cell(page: str, label: str) -> str:
    m = re.search(rf"<dt>{re.escape(label)}</dt><dd>(.*?)</dd>", page, re.S)
    assert m, label
    return m.group(1)


def test_box_cox_cell_states_each_estimate_once():
    # The shipped selection example (demo data, Box-Cox lambda also on rank 1's design) is the
    # body: the cell quotes each design's estimate and interval once, never the first twice.
    example = Path(__file__).resolve().parents[2] / "openapi_examples" / "selections.response.json"
    body = json.loads(example.read_text())
    bc = body["search"]["box_cox"]
    assert bc.get("context")  # the example exercises the two-estimate case
    cell = _summary_cell(
        render_report(body, None, {"response": "repair_cost"}), "Box-Cox λ of the response"
    )
    assert cell.startswith(esc(bc["context"]))
    assert cell.count("95% interval") == 2  # once per design


def test_box_cox_cell_without_context_names_the_design_and_ladder():
    bc = {
        "lambda": 0.02,
        "ci_low": -0.1,
        "ci_high": 0.15,
        "ladder": 0.0,
        "design": "untransformed predictors",
    }
    assert _box_cox_cell(bc) == (
        "0.02000 (95% interval -0.1000 to 0.1500; nearest ladder power 0; untransformed predictors)"
    )
