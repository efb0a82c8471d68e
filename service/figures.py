"""Render the diagnostic plot data of :func:`service.core.plots.diagnostic_plots` as a figure.

:func:`render_figure` draws one figure with a panel per plot (residuals vs fitted, normal
Q-Q with its envelope, spread vs fitted, influence, and one component-plus-residual panel per
numeric predictor) and returns SVG or PNG bytes.

Thread safety: each call builds its own :class:`matplotlib.figure.Figure` and canvas (no
pyplot, no global figure manager) and passes every style explicitly.  The one global setting
used, ``svg.fonttype = "none"`` (keep text as searchable ``<text>`` elements instead of glyph
outlines), can only be set through ``matplotlib.rcParams``; it is set inside ``rc_context``
under a module lock so concurrent SVG renders do not interleave.
"""

from __future__ import annotations

import io
import math
import threading

import matplotlib
import numpy as np
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.backends.backend_svg import FigureCanvasSVG
from matplotlib.figure import Figure

from .safetext import visible, visible_all

#: at most this many component-plus-residual panels are drawn
MAX_PARTIAL_PANELS = 6
#: flagged rows labelled per panel
MAX_LABELS = 5

_SVG_LOCK = threading.Lock()

INK = "#1f2933"  # text and axes
POINT = "#3b6ea8"  # observations
SMOOTH = "#d9822b"  # LOWESS curves
FIT = "#1f2933"  # fitted component line
REFERENCE = "#7b8794"  # reference and cut-off lines
FLAG = "#c23030"  # flagged rows
BAND = "#c9d6e8"  # envelope


def _style(ax, panel: dict) -> None:
    # parse_math=False: caller-supplied column names are text, never mathtext markup
    ax.set_title(
        panel.get("title", ""),
        loc="left",
        fontsize=11,
        fontweight="bold",
        color=INK,
        parse_math=False,
    )
    ax.set_xlabel(panel.get("x_label", ""), fontsize=9, color=INK, parse_math=False)
    ax.set_ylabel(panel.get("y_label", ""), fontsize=9, color=INK, parse_math=False)
    ax.tick_params(labelsize=8, colors=INK)
    ax.grid(True, color="#e4e7eb", linewidth=0.6)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


def _marker_size(count: int) -> tuple[float, float]:
    """(area, alpha) that keep a scatter of ``count`` points readable."""
    if count <= 200:
        return 18.0, 0.8
    if count <= 1000:
        return 10.0, 0.55
    return 5.0, 0.35


def _points(ax, points: dict, sizes=None) -> None:
    x, y = points.get("x", []), points.get("y", [])
    if not x:
        return
    area, alpha = _marker_size(len(x))
    s = area if sizes is None else sizes
    ax.scatter(x, y, s=s, color=POINT, alpha=alpha, edgecolors="none", zorder=2)


def _labels(ax, labels: list[dict]) -> None:
    for item in labels[:MAX_LABELS]:
        ax.scatter(
            [item["x"]],
            [item["y"]],
            s=40,
            facecolors="none",
            edgecolors=FLAG,
            linewidths=1.2,
            zorder=4,
        )
        ax.annotate(
            str(item["row"]),
            (item["x"], item["y"]),
            xytext=(4, 4),
            textcoords="offset points",
            fontsize=8,
            color=FLAG,
            zorder=5,
        )


def _smoother(ax, smoother: dict | None, label: str = "LOWESS") -> None:
    if smoother and smoother.get("x"):
        ax.plot(smoother["x"], smoother["y"], color=SMOOTH, linewidth=1.8, label=label, zorder=3)


def _reference_lines(ax, lines: list[dict]) -> None:
    for line in lines or []:
        ax.plot(line["x"], line["y"], color=REFERENCE, linestyle="--", linewidth=1.0, zorder=1)


def _caption(ax, panel: dict, shown: int) -> None:
    total = panel.get("n_total")
    if total and shown < total:
        ax.text(
            0.99,
            0.01,
            f"showing {shown} of {total} rows",
            transform=ax.transAxes,
            ha="right",
            va="bottom",
            fontsize=7,
            color=REFERENCE,
        )


def _empty(ax, panel: dict) -> None:
    ax.text(
        0.5,
        0.5,
        panel.get("note") or "no data to show",
        transform=ax.transAxes,
        parse_math=False,
        ha="center",
        va="center",
        fontsize=9,
        color=REFERENCE,
        wrap=True,
    )


def _draw_xy(ax, panel: dict, zero_line: bool = False) -> None:
    points = panel.get("points") or {}
    if not points.get("x"):
        _empty(ax, panel)
        return
    _reference_lines(ax, panel.get("reference_lines"))
    _points(ax, points)
    _smoother(ax, panel.get("smoother"))
    _labels(ax, panel.get("labels", []))
    _caption(ax, panel, len(points["x"]))
    if panel.get("smoother"):
        ax.legend(loc="best", fontsize=7, frameon=False)


def _draw_qq(ax, panel: dict) -> None:
    points = panel.get("points") or {}
    if not points.get("x"):
        _empty(ax, panel)
        return
    env = panel.get("envelope")
    if env:
        ax.fill_between(
            env["x"],
            env["lower"],
            env["upper"],
            color=BAND,
            alpha=0.7,
            linewidth=0,
            label="95% envelope",
            zorder=1,
        )
    line = panel.get("reference_line")
    if line:
        ax.plot(
            line["x"],
            line["y"],
            color=REFERENCE,
            linestyle="--",
            linewidth=1.0,
            label="quartile line",
            zorder=1,
        )
    _points(ax, points)
    _labels(ax, panel.get("labels", []))
    _caption(ax, panel, len(points["x"]))
    ax.legend(loc="upper left", fontsize=7, frameon=False)


def _draw_influence(ax, panel: dict) -> None:
    points = panel.get("points") or {}
    if not points.get("x"):
        _empty(ax, panel)
        return
    _reference_lines(ax, panel.get("reference_lines"))
    size = np.asarray(points.get("size") or np.zeros(len(points["x"])), dtype=float)
    top = float(size.max()) if size.size else 0.0
    area, _ = _marker_size(len(points["x"]))
    sizes = area + (120.0 * size / top if top > 0 else 0.0)
    _points(ax, points, sizes=sizes)
    _labels(ax, panel.get("labels", []))
    _caption(ax, panel, len(points["x"]))
    ax.text(
        0.99,
        0.99,
        "marker area ~ Cook's distance",
        transform=ax.transAxes,
        ha="right",
        va="top",
        fontsize=7,
        color=REFERENCE,
    )


def _draw_partial(ax, panel: dict) -> None:
    points = panel.get("points") or {}
    if not points.get("x"):
        _empty(ax, panel)
        return
    _points(ax, points)
    comp = panel.get("component")
    if comp and comp.get("x"):
        ax.plot(comp["x"], comp["y"], color=FIT, linewidth=1.4, label="fitted component", zorder=3)
    _smoother(ax, panel.get("smoother"))
    _caption(ax, panel, len(points["x"]))
    ax.legend(loc="upper left", fontsize=7, frameon=False)


_DRAW = {
    "residuals_fitted": lambda ax, p: _draw_xy(ax, p),
    "normal_quantiles": _draw_qq,
    "spread_fitted": lambda ax, p: _draw_xy(ax, p),
    "influence": _draw_influence,
    "partial_residuals": _draw_partial,
}


def _panels(plots: dict) -> list[tuple[str, dict]]:
    out = [
        (key, plots[key])
        for key in ("residuals_fitted", "normal_quantiles", "spread_fitted", "influence")
        if plots.get(key)
    ]
    for panel in (plots.get("partial_residuals") or [])[:MAX_PARTIAL_PANELS]:
        out.append(("partial_residuals", panel))
    return out


def render_figure(plots: dict, fmt: str = "svg", title: str | None = None) -> bytes:
    """Draw the diagnostic panels of ``plots`` and return the figure as ``fmt`` bytes.

    ``plots`` is the dict returned by ``diagnostic_plots``; ``fmt`` is ``"svg"`` or
    ``"png"``; ``title`` (optional) is drawn above the panels.  Flagged rows are circled and
    labelled with the caller's row number.
    """
    if fmt not in ("svg", "png"):
        raise ValueError(f"fmt must be 'svg' or 'png'; got {fmt!r}")
    if not isinstance(plots, dict):
        raise ValueError(
            f"plots must be the dict from diagnostic_plots; got {type(plots).__name__}"
        )
    plots = visible_all(plots)  # caller names and levels: bidi controls shown as U+XXXX
    title = visible(title) if title else title
    panels = _panels(plots)
    if not panels:
        raise ValueError("plots holds no panel to draw")
    ncols = 2 if len(panels) <= 4 else 3
    nrows = math.ceil(len(panels) / ncols)
    fig = Figure(
        figsize=(5.0 * ncols, 3.9 * nrows + (0.4 if title else 0.0)),
        dpi=100,
        layout="constrained",
        facecolor="white",
    )
    axes = fig.subplots(nrows, ncols, squeeze=False).ravel()
    for ax, (kind, panel) in zip(axes, panels, strict=False):  # spare axes stay empty
        _style(ax, panel)
        _DRAW[kind](ax, panel)
    for ax in axes[len(panels) :]:
        ax.set_visible(False)
    if title:
        fig.suptitle(title, fontsize=13, fontweight="bold", color=INK, parse_math=False)
    buf = io.BytesIO()
    if fmt == "png":
        FigureCanvasAgg(fig).print_png(buf)
    else:
        canvas = FigureCanvasSVG(fig)
        # fixed hash salt: identical plots give byte-identical SVG (stable element ids)
        rc = {"svg.fonttype": "none", "svg.hashsalt": "bestscale"}
        with _SVG_LOCK, matplotlib.rc_context(rc):
            canvas.print_svg(buf, metadata={"Date": None})
    return buf.getvalue()
