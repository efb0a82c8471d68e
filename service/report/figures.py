"""Draw the plot data of :func:`service.core.plots.diagnostic_plots` as one figure.

The figure is drawn from the typed :class:`~service.core.plots.DiagnosticPlots` it is
handed (never from the JSON form of the plot data).

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
and the flag rule.  Labels of flagged rows are placed so they never overlap each other, the
legend or the note; a row whose label finds no free place is named in the panel's note.

The SVG is written directly (:mod:`.svg`): text stays ``<text>``, each layer of points is one
``<path>``, and the same plot data give the same bytes.  The PNG is that SVG rasterised by
resvg (``resvg_py``) with the DejaVu Sans files matplotlib ships, so both formats show one
drawing and no system font is needed.

**Thinning what is drawn.**  A panel draws every row it is handed up to
:data:`PANEL_MAX_POINTS` (2000) points, and a figure at most :data:`FIGURE_MAX_POINTS` marks
in all (the influence strip counts twice: stems and dots), so a figure stays near 150 KB
whatever the number of rows.  Beyond its share a panel keeps, in this order: the flagged rows
(every labelled row, then the rows flagged in the influence panel by decreasing Cook's
distance, at most ``MAX_FLAGGED_ROWS`` in all), in the normal-quantile panel the tenth of its
share at each end, and then the rows that come first in a fixed order of row numbers
(``row * 2654435761 mod 2**32``, Knuth's multiplicative hash), so every panel keeps the same
rows and the same data always give the same drawing.  The panel's note says how many rows
it shows out of how many.
"""

from __future__ import annotations

import math
import os
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import matplotlib
import numpy as np
import resvg_py

from ..core.conditions import MAX_FLAGGED_ROWS
from ..core.plots import (
    Curve,
    DiagnosticPlots,
    InfluencePanel,
    InfluencePoints,
    Label,
    NormalPanel,
    PartialResidualsPanel,
    ResidualsPanel,
    Scatter,
    Smoother,
    SpreadPanel,
)
from .safetext import visible, visible_all
from .svg import (
    ASCENT,
    DESCENT,
    FONT_FAMILY,
    attrs,
    dots,
    esc,
    fit_line,
    lines_of_text,
    num,
    polyline,
    stems,
    text,
    text_width,
    tick_labels,
    ticks,
    wrap,
)

#: at most this many predictor panels are drawn
MAX_PARTIAL_PANELS = 6
#: flagged rows labelled per panel
MAX_LABELS = 5
#: panels per row
COLUMNS = 3
#: points a panel draws before it thins (every row up to this many)
PANEL_MAX_POINTS = 2000
#: marks a figure draws in all (the influence strip counts twice: stems and dots)
FIGURE_MAX_POINTS = 12000

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

# layout, in user units (pixels at the figure's own size, 100 per inch)
WIDTH = 1600
PLOT_W, COL_GAP, LEFT = 420.0, 120.0, 76.0
PANEL_H, STRIP_H = 330.0, 220.0
TOP, AXIS_H, ROW_GAP, BOTTOM = 14.0, 44.0, 24.0, 12.0
# font sizes and line heights
FIG_TITLE, FIG_LEAD = 18.0, 23.0
TITLE, TITLE_LEAD = 15.0, 19.0
READING, READING_LEAD = 10.5, 13.0
AXIS, TICK, LEGEND, NOTE, LABEL, FOOT = 12.0, 10.5, 9.5, 9.0, 11.0, 10.5
# strokes: widths and dashes in pixels
THIN, REF_W, SMOOTH_W, STEM_W = 0.8, 1.4, 2.5, 1.5
DASHED, DOTTED = "5.6 4.2", "1.8 3.6"
CIRCLE_R, CIRCLE_W = 4.7, 1.5


def _marker(count: int) -> tuple[float, float, int]:
    """(dot diameter in pixels, opacity, layers) that keep ``count`` points readable; points
    are dealt round-robin to the layers so overlaps of different layers still darken."""
    if count <= 200:
        return 5.6, 0.75, 1
    if count <= 1000:
        return 4.2, 0.5, 2
    return 2.8, 0.3, 4


# ------------------------------------------------------------------------ thinning
def _hash_order(rows: np.ndarray) -> np.ndarray:
    """Knuth's multiplicative hash of row numbers: a fixed order that looks random."""
    return (rows.astype(np.uint64) * np.uint64(2654435761)) % np.uint64(2**32)


#: a panel of the figure
Panel = ResidualsPanel | SpreadPanel | NormalPanel | InfluencePanel | PartialResidualsPanel


def _labels_of(panel: Panel) -> tuple[Label, ...]:
    return () if isinstance(panel, PartialResidualsPanel) else panel.labels


def _must_keep(plots: DiagnosticPlots, panels: list[Panel]) -> np.ndarray:
    """Rows every panel draws: labelled rows, then rows flagged in the influence panel by
    decreasing Cook's distance; at most MAX_FLAGGED_ROWS."""
    rows: list[int] = []
    for panel in panels:
        rows += [int(lab.row) for lab in _labels_of(panel)]
    pts = plots.influence.points
    flags = pts.flag
    if flags and len(flags) == len(pts.row):
        y = np.asarray(pts.y, dtype=float)
        r = np.asarray(pts.row)
        hit = np.flatnonzero(np.asarray(flags) != "")
        hit = hit[np.lexsort((r[hit], -y[hit]))]
        rows += [int(v) for v in r[hit]]
    unique = list(dict.fromkeys(rows))[:MAX_FLAGGED_ROWS]
    return np.asarray(unique, dtype=np.int64)


def _shown(
    points: Scatter | InfluencePoints, cap: int, must: np.ndarray, tails: bool = False
) -> np.ndarray:
    """Indices of the points a panel draws (see the module's thinning rule)."""
    n = len(points.x)
    if n <= cap:
        return np.arange(n)
    rows = np.asarray(points.row, dtype=np.int64)
    chosen = np.isin(rows, must)
    if tails:
        order = np.argsort(np.asarray(points.x, dtype=float), kind="stable")
        t = max(cap // 10, 1)
        chosen[order[:t]] = True
        chosen[order[-t:]] = True
    room = cap - int(chosen.sum())
    if room > 0:
        free = np.flatnonzero(~chosen)
        chosen[free[np.argsort(_hash_order(rows[free]), kind="stable")[:room]]] = True
    return np.flatnonzero(chosen)


# ------------------------------------------------------------------------- one panel
Box = tuple[float, float, float, float]  # x0, y0, x1, y1 (y grows downwards)


def _overlaps(a: Box, b: Box) -> bool:
    return not (a[2] <= b[0] or b[2] <= a[0] or a[3] <= b[1] or b[3] <= a[1])


@dataclass
class _Axes:
    """The plot area of one panel: pixel frame, data limits and what is drawn in it."""

    x0: float
    y0: float
    w: float
    h: float
    xlim: tuple[float, float] = (0.0, 1.0)
    ylim: tuple[float, float] = (0.0, 1.0)
    parts: list[str] = field(default_factory=list)
    taken: list[Box] = field(default_factory=list)  # legend, note and labels placed so far

    def px(self, x) -> np.ndarray:
        lo, hi = self.xlim
        return self.x0 + (np.asarray(x, dtype=float) - lo) * (self.w / (hi - lo))

    def py(self, y) -> np.ndarray:
        lo, hi = self.ylim
        return self.y0 + self.h - (np.asarray(y, dtype=float) - lo) * (self.h / (hi - lo))

    def limits(
        self,
        xs: list,
        ys: list,
        y_floor: float | None = None,
        x_exact: bool = False,
    ) -> None:
        """Data limits over every series, widened by 5% (matplotlib's default margins)."""
        self.xlim = _span(xs, exact=x_exact)
        self.ylim = _span(ys, floor=y_floor)

    def inside(self, box: Box) -> bool:
        return (
            box[0] >= self.x0
            and box[2] <= self.x0 + self.w
            and box[1] >= self.y0
            and box[3] <= self.y0 + self.h
        )


def _span(series: list, floor: float | None = None, exact: bool = False) -> tuple[float, float]:
    values = [np.asarray(s, dtype=float).ravel() for s in series if s is not None and len(s)]
    data = np.concatenate(values) if values else np.array([0.0, 1.0])
    data = data[np.isfinite(data)]
    if data.size == 0:
        data = np.array([0.0, 1.0])
    lo, hi = float(data.min()), float(data.max())
    if exact:
        return lo, hi
    if hi - lo <= 1e-12 * max(abs(lo), abs(hi), 1e-300):
        pad = abs(lo) * 0.1 if lo else 1.0
        lo, hi = lo - pad, hi + pad
    else:
        pad = 0.05 * (hi - lo)
        lo, hi = lo - pad, hi + pad
    if floor is not None:
        lo = floor
        hi = max(hi, floor + 1e-12)
    return lo, hi


def _frame(ax: _Axes, panel: Panel, integer_x: bool = False, empty: bool = False) -> None:
    """Grid, left and bottom spines, ticks, tick labels and axis titles."""
    x1, y1 = ax.x0 + ax.w, ax.y0 + ax.h
    ylabel_x = ax.x0 - 10.0
    if not empty:
        xt = ticks(*ax.xlim, max(3, min(10, int(ax.w / 55))), integer=integer_x)
        yt = ticks(*ax.ylim, max(3, min(8, int(ax.h / 45))))
        gx, gy = ax.px(xt), ax.py(yt)
        grid = "".join(f"M{num(v)} {num(ax.y0)}V{num(y1)}" for v in gx)
        grid += "".join(f"M{num(ax.x0)} {num(v)}H{num(x1)}" for v in gy)
        ax.parts.insert(0, f'<path fill="none" stroke="{GRID}" stroke-width="{THIN}" d="{grid}"/>')
        marks = "".join(f"M{num(v)} {num(y1)}v3" for v in gx)
        marks += "".join(f"M{num(ax.x0)} {num(v)}h-3" for v in gy)
        ax.parts.append(f'<path fill="none" stroke="{INK}" stroke-width="{THIN}" d="{marks}"/>')
        base = y1 + 4 + ASCENT * TICK
        ax.parts += [
            text(float(v), base, s, TICK, INK, "middle")
            for v, s in zip(gx, tick_labels(xt), strict=True)
        ]
        ylabels = tick_labels(yt)
        shift = (ASCENT - DESCENT) * TICK / 2
        ax.parts += [
            text(ax.x0 - 5, float(v) + shift, s, TICK, INK, "end")
            for v, s in zip(gy, ylabels, strict=True)
        ]
        widest = max((text_width(s, TICK) for s in ylabels), default=0.0)
        ylabel_x = ax.x0 - 5 - widest - 6
    spine = f"M{num(ax.x0)} {num(ax.y0)}V{num(y1)}H{num(x1)}"
    ax.parts.append(f'<path fill="none" stroke="{MUTED}" stroke-width="{THIN}" d="{spine}"/>')
    xlabel, xsize = fit_line(panel.heading.x_label, ax.w, AXIS, 7.0)
    ax.parts.append(text(ax.x0 + ax.w / 2, y1 + AXIS_H - 8, xlabel, xsize, INK, "middle"))
    ylabel, ysize = fit_line(_y_label(panel), ax.h, AXIS, 7.0)
    ax.parts.append(text(ylabel_x, ax.y0 + ax.h / 2, ylabel, ysize, INK, "middle", rotate=True))


def _y_label(panel: Panel) -> str:
    if panel.heading.question == "normal":
        return "standardised residual − normal quantile"
    return panel.heading.y_label


def _points(ax: _Axes, x, y) -> int:
    """One path of dots per layer; returns the number of points drawn."""
    if len(x) == 0:
        return 0
    size, alpha, layers = _marker(len(x))
    px, py = ax.px(x), ax.py(y)
    order = np.argsort(px, kind="stable")  # short relative moves
    for k in range(layers):
        sel = order[k::layers]
        ax.parts.append(
            f'<path class="pts" transform="scale(.1)" fill="none" stroke="{POINT}"'
            f' stroke-opacity="{alpha}" stroke-width="{num(10 * size)}" stroke-linecap="round"'
            f' d="{dots(px[sel], py[sel])}"/>'
        )
    return len(x)


def _line(ax: _Axes, x, y, colour: str, width: float, close: bool = False) -> None:
    d = polyline(ax.px(x), ax.py(y), close=close)
    if not d:
        return
    if close:
        ax.parts.append(f'<path transform="scale(.1)" fill="{colour}" stroke="none" d="{d}"/>')
        return
    ax.parts.append(
        f'<path transform="scale(.1)" fill="none" stroke="{colour}"'
        f' stroke-width="{num(10 * width)}" stroke-linejoin="round" d="{d}"/>'
    )


def _hline(ax: _Axes, y: float, colour: str, width: float, dash: str | None) -> None:
    py = float(ax.py(y))
    ax.parts.append(
        f'<path fill="none" stroke="{colour}" stroke-width="{num(width)}"'
        f'{attrs(stroke_dasharray=dash)} d="M{num(ax.x0)} {num(py)}H{num(ax.x0 + ax.w)}"/>'
    )


def _curve(
    ax: _Axes, curve: Smoother | Curve | None, colour: str = SMOOTH, minus_x: bool = False
) -> bool:
    if curve is None or not curve.x:
        return False
    x = np.asarray(curve.x, dtype=float)
    y = np.asarray(curve.y, dtype=float)
    _line(ax, x, y - x if minus_x else y, colour, SMOOTH_W)
    return True


# legend entries: (swatch, colour, dash, label); swatch is "line", "band" or "none"
Entry = tuple[str, str, str | None, str]


def _legend(ax: _Axes, entries: list[Entry], where: str = "left") -> None:
    if not entries:
        return
    lead, pad, swatch = LEGEND * 1.4, 5.0, 20.0
    width = pad * 2 + swatch + 6 + max(text_width(e[3], LEGEND) for e in entries)
    height = pad * 2 + lead * len(entries) - (lead - LEGEND * (ASCENT + DESCENT))
    x0 = ax.x0 + 6 if where == "left" else ax.x0 + ax.w - 6 - width
    y0 = ax.y0 + 6
    ax.taken.append((x0, y0, x0 + width, y0 + height))
    out = [
        f'<rect x="{num(x0)}" y="{num(y0)}" width="{num(width)}" height="{num(height)}"'
        ' fill="#fff" fill-opacity="0.85"/>'
    ]
    for k, (kind, colour, dash, label) in enumerate(entries):
        base = y0 + pad + k * lead + ASCENT * LEGEND
        mid = base - 0.35 * LEGEND
        sx = x0 + pad
        if kind == "line":
            out.append(
                f'<path fill="none" stroke="{colour}" stroke-width="2"{attrs(stroke_dasharray=dash)}'
                f' d="M{num(sx)} {num(mid)}h{num(swatch)}"/>'
            )
        elif kind == "band":
            out.append(
                f'<rect x="{num(sx)}" y="{num(mid - 4)}" width="{num(swatch)}" height="8"'
                f' fill="{colour}"/>'
            )
        out.append(text(sx + swatch + 6, base, label, LEGEND, INK))
    ax.parts.append("".join(out))


def _note(ax: _Axes, note: str) -> None:
    """Muted note at the lower right inside the plot area, on a white ground."""
    lines = wrap(note, ax.w - 12, NOTE)
    if not lines:
        return
    lead = NOTE * 1.25
    width = max(text_width(s, NOTE) for s in lines) + 4
    height = lead * len(lines) + 2
    x1, y1 = ax.x0 + ax.w - 2, ax.y0 + ax.h - 2
    box = (x1 - width, y1 - height, x1, y1)
    ax.taken.append(box)
    first = box[1] + 1 + ASCENT * NOTE
    ax.parts.append(
        f'<rect x="{num(box[0])}" y="{num(box[1])}" width="{num(width)}" height="{num(height)}"'
        ' fill="#fff"/>' + lines_of_text(x1 - 2, first, lines, NOTE, lead, MUTED, "end")
    )


_OFFSETS = [(dx, dy) for r in (5, 11, 18, 26) for dx, dy in ((r, r), (r, -r), (-r, r), (-r, -r))]
_OFFSETS += [(0, r) for r in (9, 16, 24)] + [(0, -r) for r in (9, 16, 24)]


def _place_labels(
    ax: _Axes, labels: tuple[Label, ...], gid: str, minus_x: bool = False
) -> list[int]:
    """Circle each flagged row and write its number where no other label, the legend or the
    note is; returns the rows left unlabelled (no free place inside the panel)."""
    skipped: list[int] = []
    circles: list[str] = []
    words: list[str] = []
    h = 1.25 * LABEL
    for item in labels[:MAX_LABELS]:
        x, y = float(item.x), float(item.y)
        if minus_x:
            y -= x
        if not (math.isfinite(x) and math.isfinite(y)):
            continue
        px, py = float(ax.px(x)), float(ax.py(y))
        circles.append(
            f'<circle cx="{num(px)}" cy="{num(py)}" r="{CIRCLE_R}" fill="none"'
            f' stroke="{FLAG_COOKS}" stroke-width="{CIRCLE_W}"/>'
        )
        word = str(item.row)
        w = text_width(word, LABEL) + 2
        for dx, dy in _OFFSETS:
            left = px + dx if dx >= 0 else px + dx - w
            top = py - dy - h if dy >= 0 else py - dy
            box = (left, top, left + w, top + h)
            if ax.inside(box) and not any(_overlaps(box, other) for other in ax.taken):
                ax.taken.append(box)
                base = top + (h - (ASCENT + DESCENT) * LABEL) / 2 + ASCENT * LABEL
                words.append(
                    f'<g id="row-label-{gid}-{esc(word)}">'
                    f"{text(left + 1, base, word, LABEL, FLAG_COOKS)}</g>"
                )
                break
        else:
            skipped.append(int(item.row))
    ax.parts += circles + words
    return skipped


def _labels_note(skipped: list[int]) -> str:
    return "" if not skipped else "; also flagged: rows " + ", ".join(map(str, skipped))


def _rows_note(panel: Panel, drawn: int) -> str:
    total = int(panel.n_total or drawn)
    if drawn >= total:
        return f"all {total} rows"
    return f"showing {drawn} of {total} rows (fixed sample; flagged rows always shown)"


def _empty(ax: _Axes, panel: Panel) -> None:
    note = None if isinstance(panel, (ResidualsPanel, PartialResidualsPanel)) else panel.note
    lines = wrap(note or "nothing to show", min(ax.w - 20, 330), 12.5)
    lead = 16.0
    first = ax.y0 + ax.h / 2 - lead * (len(lines) - 1) / 2 + 0.35 * 12.5
    ax.parts.append(lines_of_text(ax.x0 + ax.w / 2, first, lines, 12.5, lead, MUTED, "middle"))


# ---------------------------------------------------------------------------- panels
def _xy(pts: Scatter | InfluencePoints, keep: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    return np.asarray(pts.x, dtype=float)[keep], np.asarray(pts.y, dtype=float)[keep]


def _xs(curve: Smoother | Curve | None) -> tuple[float, ...] | None:
    return None if curve is None else curve.x


def _ys(curve: Smoother | Curve | None) -> tuple[float, ...] | None:
    return None if curve is None else curve.y


def _draw_straight(ax: _Axes, panel: ResidualsPanel, keep: np.ndarray, gid: str) -> None:
    x, y = _xy(panel.points, keep)
    smooth = panel.smoother
    ax.limits([x, _xs(smooth)], [y, _ys(smooth), [0.0]])
    _frame(ax, panel)
    _hline(ax, 0.0, MUTED, REF_W, DASHED)
    drawn = _points(ax, x, y)
    entries: list[Entry] = [("line", MUTED, "4 3", "zero")]
    if _curve(ax, smooth):
        entries.append(("line", SMOOTH, None, "LOWESS smoother"))
    _legend(ax, entries)
    _labels_and_note(ax, panel, drawn, gid)


def _draw_spread(ax: _Axes, panel: SpreadPanel, keep: np.ndarray, gid: str) -> None:
    x, y = _xy(panel.points, keep)
    smooth = panel.smoother
    refs = [float(line.y[0]) for line in panel.reference_lines]
    ax.limits([x, _xs(smooth)], [y, _ys(smooth), refs], y_floor=0.0)
    _frame(ax, panel)
    entries: list[Entry] = []
    for value in refs:
        _hline(ax, value, MUTED, 1.8, DOTTED)
        entries.append(("line", MUTED, "1.5 2", f"expected under even spread ({value:.2f})"))
    drawn = _points(ax, x, y)
    if _curve(ax, smooth):
        entries.append(("line", SMOOTH, None, "LOWESS smoother"))
    _legend(ax, entries, "right")
    _labels_and_note(ax, panel, drawn, gid)


def _draw_normal(ax: _Axes, panel: NormalPanel, keep: np.ndarray, gid: str) -> None:
    """Departures from the normal quantiles: a normal sample lies along 0 inside the band."""
    x, y = _xy(panel.points, keep)
    env = panel.envelope
    line = panel.reference_line
    xs: list = [x]
    ys: list = [y - x, [0.0]]
    band = None
    if env is not None and env.x:
        ex = np.asarray(env.x, dtype=float)
        band = (ex, np.asarray(env.lower, dtype=float) - ex, np.asarray(env.upper) - ex)
        xs.append(ex)
        ys += [band[1], band[2]]
    ref = None
    if line is not None and line.x:
        lx = np.asarray(line.x, dtype=float)
        ref = (lx, np.asarray(line.y, dtype=float) - lx)
        xs.append(lx)
        ys.append(ref[1])
    ax.limits(xs, ys)
    _frame(ax, panel)
    entries: list[Entry] = []
    if band is not None and env is not None:
        ring_x = np.concatenate([band[0], band[0][::-1]])
        ring_y = np.concatenate([band[2], band[1][::-1]])
        _line(ax, ring_x, ring_y, BAND, 0.0, close=True)
        level = round(100 * float(env.level))
        entries.append(("band", BAND, None, f"{level}% band for a normal sample"))
    _hline(ax, 0.0, MUTED, REF_W, DASHED)
    if ref is not None:
        _line(ax, ref[0], ref[1], SMOOTH, 1.8)
        entries.append(("line", SMOOTH, None, "line through the quartiles"))
    drawn = _points(ax, x, y - x)
    _legend(ax, entries)
    _labels_and_note(ax, panel, drawn, gid, minus_x=True)


def _draw_influence(ax: _Axes, panel: InfluencePanel, keep: np.ndarray, gid: str) -> None:
    pts = panel.points
    x, y = _xy(pts, keep)
    flag = np.asarray(pts.flag)[keep]
    top = float(np.max(y)) if y.size else 0.0
    entries: list[Entry] = [
        ("line", FLAG_COOKS, None, "flagged: Cook's distance"),
        ("line", FLAG_OTHER, None, "flagged: leverage, DFFITS or |t|"),
        ("line", QUIET, None, "not flagged"),
    ]
    lines: list[tuple[float, str, str | None]] = []
    for cut in panel.cutoffs:
        value = float(cut.value)
        fail = cut.name.startswith("fail")
        colour, dash = (FLAG_COOKS, None) if fail else (MUTED, DASHED)
        label = f"{'fail' if fail else 'flag'} line: Cook's distance {value:.3g}"
        if value <= max(top * 1.15, 1e-12) or not fail:
            lines.append((value, colour, dash))
            entries.append(("line", colour, "4 3" if dash else None, label))
        else:
            entries.append(("none", "#fff", None, f"{label} (above every row)"))
    ax.limits(
        [x - 0.5, x + 0.5],
        [y, [v for v, _, _ in lines]],
        y_floor=0.0,
        x_exact=True,
    )
    _frame(ax, panel, integer_x=True)
    for value, colour, dash in lines:
        _hline(ax, value, colour, REF_W, dash)
    base = float(ax.py(0.0))
    size = 4.4
    for reason, colour in (("", QUIET), ("other", FLAG_OTHER), ("cooks", FLAG_COOKS)):
        m = flag == reason
        if not m.any():
            continue
        px, py = ax.px(x[m]), ax.py(y[m])
        ax.parts.append(
            f'<path class="stems" transform="scale(.1)" fill="none" stroke="{colour}"'
            f' stroke-width="{num(10 * STEM_W)}" d="{stems(px, py, base)}"/>'
            f'<path class="pts" transform="scale(.1)" fill="none" stroke="{colour}"'
            f' stroke-width="{num(10 * size)}" stroke-linecap="round" d="{dots(px, py)}"/>'
        )
    _legend(ax, entries, "right")
    _labels_and_note(ax, panel, len(x), gid)


def _draw_predictor(ax: _Axes, panel: PartialResidualsPanel, keep: np.ndarray, gid: str) -> None:
    x, y = _xy(panel.points, keep)
    comp = panel.component
    smooth = panel.smoother
    ax.limits([x, comp.x, _xs(smooth)], [y, comp.y, _ys(smooth)])
    _frame(ax, panel)
    drawn = _points(ax, x, y)
    entries: list[Entry] = []
    if _curve(ax, comp, EFFECT):
        entries.append(("line", EFFECT, None, "fitted effect"))
    if _curve(ax, smooth):
        entries.append(("line", SMOOTH, None, "LOWESS smoother"))
    _legend(ax, entries)
    _note(ax, _rows_note(panel, drawn))


def _labels_and_note(ax: _Axes, panel: Panel, drawn: int, gid: str, minus_x: bool = False) -> None:
    """Reserve the note's place first (its final text is known only after the labels, so the
    longest possible note is reserved), place the labels, then write the note."""
    labels = _labels_of(panel)
    rows_note = _rows_note(panel, drawn)
    longest = rows_note + _labels_note([int(lab.row) for lab in labels[:MAX_LABELS]])
    mark = len(ax.taken)
    _note_box_only(ax, longest)
    skipped = _place_labels(ax, labels, gid, minus_x)
    del ax.taken[mark]  # the reserved place; the real note follows
    _note(ax, rows_note + _labels_note(skipped))


def _note_box_only(ax: _Axes, note: str) -> None:
    lines = wrap(note, ax.w - 12, NOTE)
    width = max((text_width(s, NOTE) for s in lines), default=0.0) + 4
    height = NOTE * 1.25 * len(lines) + 2
    x1, y1 = ax.x0 + ax.w - 2, ax.y0 + ax.h - 2
    ax.taken.append((x1 - width, y1 - height, x1, y1))


#: draws one kind of panel (each function takes its own panel type)
Draw = Callable[[_Axes, Any, np.ndarray, str], None]


@dataclass
class _Slot:
    panel: Panel
    draw: Draw
    x0: float
    w: float
    h: float
    gid: str


def _footer(plots: DiagnosticPlots) -> str:
    rule = plots.influence.flag_rule
    text_ = "Rows are numbered from 1 (1 = first data row). Circled points are flagged rows"
    return text_ + (f"; {rule}." if rule else ".")


def _head(slot: _Slot) -> tuple[list[str], list[str]]:
    title = wrap(slot.panel.heading.title, slot.w, TITLE, bold=True)
    reading = wrap(slot.panel.heading.reading, slot.w, READING)
    return title, reading


def _panel_svg(slot: _Slot, y_head: float, plot_y: float, keep: np.ndarray) -> str:
    title, reading = _head(slot)
    head = lines_of_text(slot.x0, y_head + ASCENT * TITLE, title, TITLE, TITLE_LEAD, INK, bold=True)
    first = y_head + len(title) * TITLE_LEAD + ASCENT * READING
    head += lines_of_text(slot.x0, first, reading, READING, READING_LEAD, MUTED)
    ax = _Axes(slot.x0, plot_y, slot.w, slot.h)
    if not slot.panel.points.x:
        ax.limits([], [])
        _frame(ax, slot.panel, empty=True)
        _empty(ax, slot.panel)
    else:
        slot.draw(ax, slot.panel, keep, slot.gid)
    return f'<g id="panel-{esc(slot.gid)}">{head}{"".join(ax.parts)}</g>'


def draw_svg(plots: DiagnosticPlots, title: str | None = None) -> str:
    """The figure as an SVG document (text); see :func:`render_figure`."""
    if not isinstance(plots, DiagnosticPlots):
        raise ValueError(
            f"plots must be the DiagnosticPlots of diagnostic_plots; got {type(plots).__name__}"
        )
    plots = visible_all(plots)  # caller names and levels: hidden characters shown as U+XXXX
    title = visible(title) if title else title
    top: list[tuple[Panel, Draw]] = [
        (plots.residuals_fitted, _draw_straight),
        (plots.spread_fitted, _draw_spread),
        (plots.normal_quantiles, _draw_normal),
    ]
    strip = plots.influence
    predictors = plots.partial_residuals[:MAX_PARTIAL_PANELS]
    full = COLUMNS * PLOT_W + (COLUMNS - 1) * COL_GAP
    rows: list[list[_Slot]] = [
        [
            _Slot(panel, draw, LEFT + c * (PLOT_W + COL_GAP), PLOT_W, PANEL_H, _gid(panel))
            for c, (panel, draw) in enumerate(top)
        ],
        [_Slot(strip, _draw_influence, LEFT, full, STRIP_H, _gid(strip))],
    ]
    for start in range(0, len(predictors), COLUMNS):
        rows.append(
            [
                _Slot(
                    panel,
                    _draw_predictor,
                    LEFT + c * (PLOT_W + COL_GAP),
                    PLOT_W,
                    PANEL_H,
                    _gid(panel, start + c + 1),
                )
                for c, panel in enumerate(predictors[start : start + COLUMNS])
            ]
        )
    slots = [s for row in rows for s in row]
    # thinning: one cap per panel from the figure's budget, the same rows kept everywhere
    with_points = [s for s in slots if s.panel.points.x]
    units = len(with_points) + sum(s.draw is _draw_influence for s in with_points)
    cap = min(PANEL_MAX_POINTS, FIGURE_MAX_POINTS // max(units, 1))
    must = _must_keep(plots, [s.panel for s in slots])
    body: list[str] = []
    y = TOP
    if title:
        lines = wrap(title, WIDTH - LEFT - 24, FIG_TITLE, bold=True)
        body.append(
            lines_of_text(LEFT, y + ASCENT * FIG_TITLE, lines, FIG_TITLE, FIG_LEAD, INK, bold=True)
        )
        y += FIG_LEAD * len(lines) + 14
    else:
        y += 8
    for row in rows:
        heads = [_head(s) for s in row]
        head_h = max(len(t) * TITLE_LEAD + len(r) * READING_LEAD for t, r in heads) + 6
        plot_y = y + head_h
        for slot in row:
            keep = _shown(
                slot.panel.points, cap, must, tails=slot.panel.heading.question == "normal"
            )
            body.append(_panel_svg(slot, y, plot_y, keep))
        y = plot_y + row[0].h + AXIS_H + ROW_GAP
    foot = wrap(_footer(plots), WIDTH - LEFT - 24, FOOT)
    body.append(lines_of_text(LEFT, y + ASCENT * FOOT, foot, FOOT, FOOT * 1.3, MUTED))
    height = math.ceil(y + FOOT * 1.3 * len(foot) + BOTTOM)
    label = "Diagnostic panels" + (f" for {title}" if title else "")
    return (
        f'<svg xmlns="http://www.w3.org/2000/svg" width="{WIDTH}" height="{height}"'
        f' viewBox="0 0 {WIDTH} {height}" role="img" aria-labelledby="figure-title">'
        f'<title id="figure-title">{esc(label)}</title>'
        f'<g font-family="{FONT_FAMILY}">'
        f'<rect width="{WIDTH}" height="{height}" fill="#fff"/>'
        f"{''.join(body)}</g></svg>\n"
    )


def _gid(panel: Panel, number: int | None = None) -> str:
    suffix = "" if number is None else f"-{number}"
    return f"{panel.heading.question}{suffix}"


# ------------------------------------------------------------------------------ PNG
def _font_files() -> list[str]:
    folder = os.path.join(matplotlib.get_data_path(), "fonts", "ttf")
    return [os.path.join(folder, f) for f in ("DejaVuSans.ttf", "DejaVuSans-Bold.ttf")]


def rasterise(svg: str) -> bytes:
    """PNG of an SVG from :func:`draw_svg` at its own size, drawn by resvg with the DejaVu
    Sans files matplotlib ships (no system font is looked up)."""
    png = resvg_py.svg_to_bytes(
        svg_string=svg,
        skip_system_fonts=True,
        font_files=_font_files(),
        background="#ffffff",
    )
    return bytes(png)


def render_figure(plots: DiagnosticPlots, fmt: str = "svg", title: str | None = None) -> bytes:
    """Draw the panels of ``plots`` and return the figure as ``fmt`` bytes.

    ``plots`` is the :class:`~service.core.plots.DiagnosticPlots` of ``diagnostic_plots``; ``fmt`` is ``"svg"`` or
    ``"png"``; ``title`` (optional) is drawn above the panels.  In SVG, each panel is a group
    whose id is ``panel-<question>`` (``panel-predictor_scale-<k>`` for the k-th predictor),
    each row label a group ``row-label-<question>-<row>``, and each layer of points a path
    of class ``pts`` holding one sub-path per point.
    """
    if fmt not in ("svg", "png"):
        raise ValueError(f"fmt must be 'svg' or 'png'; got {fmt!r}")
    svg = draw_svg(plots, title)
    return svg.encode("utf-8") if fmt == "svg" else rasterise(svg)
