"""Draw the plot data of :func:`service.core.plots.diagnostic_plots` as one figure.

The figure is organised around the questions a reader asks of a fitted scale, one panel per
question, each titled with the question and a one-line reading of what to look for:

- top row: *Is the scale straight?* (residuals against fitted values), *Is the spread even?*
  (|standardised residual| against fitted values, with the size expected under even normal
  spread) and *Are the residuals close to normal?* (the departure of each ordered standardised
  residual from its normal quantile, so a normal sample lies along 0 inside the 95% band);
- a full-width strip: *Which rows pull the fit?* (Cook's distance by row, coloured by the
  reason a row is flagged, with the flag and fail cut-offs the conditions use);
- then one panel per numeric predictor: *Is the scale of X right?* (partial residuals against
  the predictor as sent, with its fitted effect).

Every panel states how many of the rows it shows, and a footer states how rows are numbered
and the flag rule.  Labels of flagged rows are placed so they never overlap; a row whose label
finds no free place is named in the panel's note instead.

Thread safety: each call builds its own :class:`matplotlib.figure.Figure` and canvas (no
pyplot, no global figure manager) and passes every style explicitly.  The one global setting
used, ``svg.fonttype = "none"`` (keep text as searchable ``<text>`` elements instead of glyph
outlines), can only be set through ``matplotlib.rcParams``; it is set inside ``rc_context``
under a module lock so concurrent SVG renders do not interleave.
"""

from __future__ import annotations

import io
import math
import textwrap
import threading
from typing import Any

import matplotlib
import numpy as np
from matplotlib.artist import Artist
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.backends.backend_svg import FigureCanvasSVG
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.typing import RcKeyType

from .safetext import visible, visible_all

#: at most this many predictor panels are drawn
MAX_PARTIAL_PANELS = 6
#: flagged rows labelled per panel
MAX_LABELS = 5
#: panels per row
COLUMNS = 3

_SVG_LOCK = threading.Lock()
DPI = 100

INK = "#22303c"  # text and axes
MUTED = "#6b7885"  # readings, captions, reference lines
POINT = "#2c7a7b"  # observations (teal)
SMOOTH = "#b5651d"  # smoothers (burnt orange)
EFFECT = "#22303c"  # fitted effect of a predictor
BAND = "#d7e6e5"  # 95% band
FLAG_COOKS = "#a4262c"  # flagged for Cook's distance
FLAG_OTHER = "#d69e2e"  # flagged for another reason only
QUIET = "#a9b4be"  # rows not flagged
GRID = "#edf0f2"

# layout, in inches
PANEL_W, PANEL_H, STRIP_H = 5.0, 3.5, 2.4
HEAD_H, GAP_H, FOOT_H, TITLE_H = 0.75, 0.95, 0.45, 0.45
LEFT, RIGHT = 0.75, 0.25
LABEL_PT = 8


def _rows_note(panel: dict, shown: int) -> str:
    total = panel.get("n_total") or shown
    if shown >= total:
        return f"all {total:,} rows"
    return f"showing {shown:,} of {total:,} rows (seeded sample; flagged rows always shown)"


def _head(ax, panel: dict, width_in: float) -> None:
    """Question as the title, the reading as a muted line below it."""
    chars = max(int(width_in * DPI / 5.2), 30)
    reading = textwrap.fill(panel.get("reading", ""), chars)
    lines = reading.count("\n") + 1 if reading else 0
    ax.set_title(
        panel.get("title", ""),
        loc="left",
        fontsize=11,
        fontweight="bold",
        color=INK,
        parse_math=False,
        pad=6 + 10 * lines,
    )
    if reading:
        ax.text(
            0.0,
            1.02,
            reading,
            transform=ax.transAxes,
            ha="left",
            va="bottom",
            fontsize=7.5,
            color=MUTED,
            parse_math=False,
        )


def _style(ax, panel: dict, x_label: str | None = None, y_label: str | None = None) -> None:
    ax.set_xlabel(x_label or panel.get("x_label", ""), fontsize=8.5, color=INK, parse_math=False)
    ax.set_ylabel(y_label or panel.get("y_label", ""), fontsize=8.5, color=INK, parse_math=False)
    ax.tick_params(labelsize=7.5, colors=INK, length=3)
    ax.grid(True, color=GRID, linewidth=0.8)
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)
    for side in ("left", "bottom"):
        ax.spines[side].set_color(MUTED)


def _marker(count: int) -> tuple[float, float]:
    """(area, alpha) that keep a scatter of ``count`` points readable."""
    if count <= 200:
        return 16.0, 0.75
    if count <= 1000:
        return 9.0, 0.5
    return 4.0, 0.3


def _scatter(ax, x, y, label: str | None = None) -> None:
    if len(x):
        area, alpha = _marker(len(x))
        ax.scatter(x, y, s=area, color=POINT, alpha=alpha, edgecolors="none", zorder=2, label=label)


def _curve(ax, curve: dict | None, label: str, color: str = SMOOTH, dy=None) -> None:
    if curve and curve.get("x"):
        y = np.asarray(curve["y"], dtype=float)
        if dy is not None:
            y = y - np.asarray(curve["x"], dtype=float)
        ax.plot(curve["x"], y, color=color, linewidth=1.8, label=label, zorder=3)


def _note(ax, text: str) -> None:
    ax.text(
        0.99,
        0.01,
        text,
        transform=ax.transAxes,
        ha="right",
        va="bottom",
        fontsize=6.5,
        color=MUTED,
        zorder=6,
        parse_math=False,
        bbox={"boxstyle": "square,pad=0.15", "facecolor": "white", "edgecolor": "none"},
    )


def _empty(ax, panel: dict) -> None:
    ax.set_xticks([])
    ax.set_yticks([])
    ax.text(
        0.5,
        0.5,
        textwrap.fill(str(panel.get("note") or "nothing to show"), 50),
        transform=ax.transAxes,
        parse_math=False,
        ha="center",
        va="center",
        fontsize=9,
        color=MUTED,
    )


def _legend(ax, handles=None, loc: str = "upper left") -> None:
    kw = {"handles": handles} if handles else {}
    if handles or ax.get_legend_handles_labels()[0]:
        ax.legend(loc=loc, fontsize=6.8, frameon=True, framealpha=0.85, edgecolor="none", **kw)


# ------------------------------------------------------------------ labels without overlap
def _label_size(text: str) -> tuple[float, float]:
    """Approximate extent of a label in display pixels (DejaVu Sans digits are ~0.64 em)."""
    px = LABEL_PT * DPI / 72.0
    return 0.64 * px * len(text) + 2.0, 1.25 * px


_OFFSETS = [(dx, dy) for r in (5, 11, 18, 26) for dx, dy in ((r, r), (r, -r), (-r, r), (-r, -r))]
_OFFSETS += [(0, r) for r in (9, 16, 24)] + [(0, -r) for r in (9, 16, 24)]


def _overlaps(a, b) -> bool:
    return not (a[2] <= b[0] or b[2] <= a[0] or a[3] <= b[1] or b[3] <= a[1])


def _place_labels(ax, labels: list[dict], transform=None) -> list[int]:
    """Circle each flagged row and write its number where no other label is; returns the rows
    left unlabelled (no free place inside the panel)."""
    ax.autoscale_view()
    frame = ax.get_window_extent()
    placed: list[tuple[float, float, float, float]] = []
    legend = ax.get_legend()
    if legend is not None:  # labels never sit under the legend either
        box = legend.get_window_extent(ax.figure.canvas.get_renderer())
        placed.append((box.x0, box.y0, box.x1, box.y1))
    skipped: list[int] = []
    for item in labels[:MAX_LABELS]:
        x, y = item["x"], transform(item) if transform else item["y"]
        ax.scatter(
            [x], [y], s=46, facecolors="none", edgecolors=FLAG_COOKS, linewidths=1.1, zorder=4
        )
        text = str(item["row"])
        w, h = _label_size(text)
        px, py = ax.transData.transform((x, y))
        for dx, dy in _OFFSETS:
            x0 = px + dx if dx >= 0 else px + dx - w
            y0 = py + dy if dy >= 0 else py + dy - h
            box = (x0, y0, x0 + w, y0 + h)
            inside = (
                box[0] >= frame.x0
                and box[2] <= frame.x1
                and box[1] >= frame.y0
                and box[3] <= frame.y1
            )
            if inside and not any(_overlaps(box, other) for other in placed):
                placed.append(box)
                ann = ax.annotate(
                    text,
                    (x, y),
                    xytext=(x0 - px, y0 - py),
                    textcoords="offset pixels",
                    ha="left",
                    va="bottom",
                    fontsize=LABEL_PT,
                    color=FLAG_COOKS,
                    zorder=5,
                    annotation_clip=False,
                )
                panel = (ax.get_gid() or "panel-plot").removeprefix("panel-")
                ann.set_gid(f"row-label-{panel}-{text}")
                break
        else:
            skipped.append(item["row"])
    return skipped


def _labels_note(skipped: list[int]) -> str:
    return "" if not skipped else "; also flagged: rows " + ", ".join(map(str, skipped))


# ------------------------------------------------------------------------------ panels
def _draw_straight(ax, panel: dict) -> str:
    pts = panel.get("points") or {}
    if not pts.get("x"):
        _empty(ax, panel)
        return ""
    ax.axhline(0.0, color=MUTED, linestyle=(0, (4, 3)), linewidth=1.0, zorder=1, label="zero")
    _scatter(ax, pts["x"], pts["y"])
    _curve(ax, panel.get("smoother"), "LOWESS smoother")
    _legend(ax)
    return _labels_note(_place_labels(ax, panel.get("labels", [])))


def _draw_spread(ax, panel: dict) -> str:
    pts = panel.get("points") or {}
    if not pts.get("x"):
        _empty(ax, panel)
        return ""
    for line in panel.get("reference_lines") or []:
        ax.axhline(
            line["y"][0],
            color=MUTED,
            linestyle=(0, (1, 2)),
            linewidth=1.3,
            zorder=1,
            label=f"expected under even spread ({line['y'][0]:.2f})",
        )
    _scatter(ax, pts["x"], pts["y"])
    _curve(ax, panel.get("smoother"), "LOWESS smoother")
    ax.set_ylim(bottom=0.0)
    _legend(ax, loc="upper right")
    return _labels_note(_place_labels(ax, panel.get("labels", [])))


def _draw_normal(ax, panel: dict) -> str:
    """Departures from the normal quantiles: a normal sample lies along 0 inside the band."""
    pts = panel.get("points") or {}
    if not pts.get("x"):
        _empty(ax, panel)
        return ""
    x = np.asarray(pts["x"], dtype=float)
    env = panel.get("envelope")
    if env:
        ex = np.asarray(env["x"], dtype=float)
        ax.fill_between(
            ex,
            np.asarray(env["lower"], dtype=float) - ex,
            np.asarray(env["upper"], dtype=float) - ex,
            color=BAND,
            linewidth=0,
            zorder=1,
            label=f"{round(100 * env.get('level', 0.95))}% band for a normal sample",
        )
    ax.axhline(0.0, color=MUTED, linestyle=(0, (4, 3)), linewidth=1.0, zorder=1)
    line = panel.get("reference_line")
    if line:
        lx = np.asarray(line["x"], dtype=float)
        ax.plot(
            lx,
            np.asarray(line["y"], dtype=float) - lx,
            color=SMOOTH,
            linewidth=1.3,
            zorder=3,
            label="line through the quartiles",
        )
    _scatter(ax, x, np.asarray(pts["y"], dtype=float) - x)
    _legend(ax)
    return _labels_note(
        _place_labels(ax, panel.get("labels", []), transform=lambda it: it["y"] - it["x"])
    )


def _draw_influence(ax, panel: dict) -> str:
    pts = panel.get("points") or {}
    if not pts.get("x"):
        _empty(ax, panel)
        return ""
    x = np.asarray(pts["x"], dtype=float)
    y = np.asarray(pts["y"], dtype=float)
    flag = np.asarray(pts.get("flag") or [""] * len(x))
    colours = {"": QUIET, "other": FLAG_OTHER, "cooks": FLAG_COOKS}
    for reason in ("", "other", "cooks"):
        m = flag == reason
        if m.any():
            ax.vlines(x[m], 0.0, y[m], color=colours[reason], linewidth=1.1, zorder=2)
            ax.scatter(x[m], y[m], s=10, color=colours[reason], zorder=3, edgecolors="none")
    top = float(np.max(y)) if y.size else 0.0
    handles: list[Artist] = [
        Line2D([], [], color=FLAG_COOKS, linewidth=2, label="flagged: Cook's distance"),
        Line2D([], [], color=FLAG_OTHER, linewidth=2, label="flagged: leverage, DFFITS or |t|"),
        Line2D([], [], color=QUIET, linewidth=2, label="not flagged"),
    ]
    for cut in panel.get("cutoffs") or []:
        value = float(cut["value"])
        fail = cut["name"].startswith("fail")
        style: dict[str, Any] = {"color": FLAG_COOKS if fail else MUTED, "linewidth": 1.0}
        style["linestyle"] = "-" if fail else (0, (4, 3))
        text = f"{'fail' if fail else 'flag'} line: Cook's distance {value:.3g}"
        if value <= max(top * 1.15, 1e-12) or not fail:
            ax.axhline(value, zorder=1, **style)
            handles.append(Line2D([], [], label=text, **style))
        else:
            handles.append(Patch(color="white", label=f"{text} (above every row)"))
    ax.set_ylim(bottom=0.0)
    ax.set_xlim(float(np.min(x)) - 0.5, float(np.max(x)) + 0.5)
    _legend(ax, handles=handles, loc="upper right")
    return _labels_note(_place_labels(ax, panel.get("labels", [])))


def _draw_predictor(ax, panel: dict) -> str:
    pts = panel.get("points") or {}
    if not pts.get("x"):
        _empty(ax, panel)
        return ""
    _scatter(ax, pts["x"], pts["y"])
    _curve(ax, panel.get("component"), "fitted effect", color=EFFECT)
    _curve(ax, panel.get("smoother"), "LOWESS smoother")
    _legend(ax)
    return ""


def _footer(plots: dict) -> str:
    rule = (plots.get("influence") or {}).get("flag_rule")
    text = "Row numbers count the request's data rows from 0. Circled points are flagged rows"
    return text + (f"; {rule}." if rule else ".")


def render_figure(plots: dict, fmt: str = "svg", title: str | None = None) -> bytes:
    """Draw the panels of ``plots`` and return the figure as ``fmt`` bytes.

    ``plots`` is the dict returned by ``diagnostic_plots``; ``fmt`` is ``"svg"`` or
    ``"png"``; ``title`` (optional) is drawn above the panels.  In SVG, each panel is a group
    whose id is ``panel-<question>`` (``panel-predictor_scale-<k>`` for the k-th predictor)
    and each row label a group ``row-label-<question>-<row>``.
    """
    if fmt not in ("svg", "png"):
        raise ValueError(f"fmt must be 'svg' or 'png'; got {fmt!r}")
    if not isinstance(plots, dict):
        raise ValueError(
            f"plots must be the dict from diagnostic_plots; got {type(plots).__name__}"
        )
    plots = visible_all(plots)  # caller names and levels: bidi controls shown as U+XXXX
    title = visible(title) if title else title
    top = [
        (key, draw)
        for key, draw in (
            ("residuals_fitted", _draw_straight),
            ("spread_fitted", _draw_spread),
            ("normal_quantiles", _draw_normal),
        )
        if plots.get(key)
    ]
    strip = plots.get("influence")
    predictors = (plots.get("partial_residuals") or [])[:MAX_PARTIAL_PANELS]
    if not top and not strip and not predictors:
        raise ValueError("plots holds no panel to draw")
    rows: list[tuple[str, float]] = []  # (kind, height in inches)
    if top:
        rows.append(("top", PANEL_H))
    if strip:
        rows.append(("strip", STRIP_H))
    rows += [("predictors", PANEL_H)] * math.ceil(len(predictors) / COLUMNS)
    width = LEFT + RIGHT + COLUMNS * PANEL_W
    title_h = TITLE_H if title else 0.0
    height = title_h + HEAD_H + sum(h for _, h in rows) + GAP_H * (len(rows) - 1) + FOOT_H + 0.35
    fig = Figure(figsize=(width, height), dpi=DPI, facecolor="white")
    FigureCanvasAgg(fig)  # a renderer to measure legends while labels are placed
    ratios = []
    for k, (_, h) in enumerate(rows):
        ratios.append(h)
        if k < len(rows) - 1:
            ratios.append(GAP_H)
    grid = fig.add_gridspec(
        len(ratios),
        COLUMNS,
        height_ratios=ratios,
        left=LEFT / width,
        right=1 - RIGHT / width,
        top=1 - (title_h + HEAD_H) / height,
        bottom=(FOOT_H + 0.35) / height,
        hspace=0.0,
        wspace=0.3,
    )
    col_w = PANEL_W * 0.77
    pending = list(enumerate(predictors, start=1))
    for k, (kind, _) in enumerate(rows):
        g = 2 * k
        if kind == "top":
            for col, (key, draw) in enumerate(top):
                ax = fig.add_subplot(grid[g, col])
                _panel(ax, plots[key], draw, col_w)
        elif kind == "strip":
            ax = fig.add_subplot(grid[g, :])
            assert strip  # the strip row exists only with an influence panel
            _panel(ax, strip, _draw_influence, width - LEFT - RIGHT)
        else:
            for col in range(COLUMNS):
                if not pending:
                    break
                ax = fig.add_subplot(grid[g, col])
                number, panel = pending.pop(0)
                _panel(ax, panel, _draw_predictor, col_w, number)
    if title:
        fig.text(
            LEFT / width,
            1 - 0.15 / height,
            title,
            ha="left",
            va="top",
            fontsize=13,
            fontweight="bold",
            color=INK,
            parse_math=False,
        )
    fig.text(
        LEFT / width,
        0.12 / height,
        textwrap.fill(_footer(plots), int((width - LEFT) * DPI / 5.0)),
        ha="left",
        va="bottom",
        fontsize=7.5,
        color=MUTED,
        parse_math=False,
    )
    buf = io.BytesIO()
    if fmt == "png":
        FigureCanvasAgg(fig).print_png(buf)
    else:
        canvas = FigureCanvasSVG(fig)
        # fixed hash salt: identical plots give byte-identical SVG (stable element ids)
        rc: dict[RcKeyType, Any] = {"svg.fonttype": "none", "svg.hashsalt": "bestscale"}
        with _SVG_LOCK, matplotlib.rc_context(rc):
            canvas.print_svg(buf, metadata={"Date": None})
    return buf.getvalue()


def _panel(ax, panel: dict, draw, width_in: float, number: int | None = None) -> None:
    suffix = "" if number is None else f"-{number}"
    ax.set_gid(f"panel-{panel.get('question', 'plot')}{suffix}")
    _head(ax, panel, width_in)
    _style(ax, panel, *_axis_labels(panel))
    extra = draw(ax, panel)
    shown = len((panel.get("points") or {}).get("x") or [])
    if shown:
        _note(ax, _rows_note(panel, shown) + extra)


def _axis_labels(panel: dict) -> tuple[str | None, str | None]:
    if panel.get("question") == "normal":
        return None, "standardised residual − normal quantile"
    return None, None
