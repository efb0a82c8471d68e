"""A small SVG drawing kit for the diagnostic figure: text metrics, escaping, ticks, paths.

Coordinates are SVG user units, which are CSS pixels at the figure's own size (100 per inch).
Everything here is a pure function of its arguments: no global state, no randomness, so the
same data give byte-identical SVG and any number of threads may draw at once.

- **Text** is written as ``<text>`` elements (searchable, selectable, read by assistive
  technology).  Its width is estimated from the advance widths of DejaVu Sans (the face the
  PNG is rasterised with and the first one the SVG asks for), so wrapping and the boxes that
  keep row labels apart agree with what is drawn.  Caller text goes through
  :func:`service.report.safetext.visible` and is XML-escaped (:func:`esc`).
- **Numbers** in paths are integers in tenths of a pixel drawn under ``scale(.1)``, written
  relative to the previous point: a scatter of n points is one ``<path>`` of n zero-length
  sub-paths (``m dx dy h0``) whose round caps draw the dots (SVG 1.1 section 11.4: a zero-length
  sub-path with round caps is painted as a circle), about 9 bytes a point.
- **Ticks** are matplotlib's :class:`~matplotlib.ticker.MaxNLocator` values (steps 1, 2, 2.5,
  5, 10), labelled with the fewest decimals that tell them apart.
- **Lines** of many vertices (smoothers, fitted effects, the edges of a band) are simplified
  with the Ramer-Douglas-Peucker rule (Ramer 1972; Douglas & Peucker 1973) to a quarter of a
  pixel: what is drawn differs from the full line by less than that anywhere.
"""

from __future__ import annotations

import html
import math
import unicodedata
from collections.abc import Iterable, Sequence

import numpy as np
from matplotlib.ticker import MaxNLocator

from .safetext import visible

#: the font asked for; DejaVu Sans ships with matplotlib and is loaded for the PNG
FONT_FAMILY = "DejaVu Sans,Verdana,Arial,sans-serif"
#: DejaVu Sans ascent and descent, in em (hhea table: 1901 and 483 of 2048 units)
ASCENT, DESCENT = 0.928, 0.236

# Advance widths in thousandths of an em, from the hmtx tables of DejaVu Sans 2.37 (regular
# and bold) as shipped with matplotlib, for printable ASCII and a few symbols the figure uses.
_MEASURED = "".join(chr(c) for c in range(32, 127)) + "−·²³…–—°±×µλ"
_REGULAR = (
    "318,401,460,838,636,950,780,275,390,390,500,838,318,361,318,337,636,636,636,636,636,636,"
    "636,636,636,636,337,337,838,838,838,531,1000,684,686,698,770,632,575,775,752,295,295,656,"
    "557,863,748,787,603,787,695,635,611,732,684,989,685,611,685,390,337,390,838,500,500,613,"
    "635,550,635,615,352,635,634,278,278,579,278,974,634,612,635,635,411,521,392,634,592,818,"
    "592,592,525,636,337,636,838,838,318,401,401,1000,500,1000,500,838,838,636,592"
)
_BOLD = (
    "348,456,521,838,696,1002,872,306,457,457,523,838,380,415,380,365,696,696,696,696,696,696,"
    "696,696,696,696,400,400,838,838,838,580,1000,774,762,734,830,683,683,821,837,372,372,775,"
    "637,995,837,850,733,850,770,720,682,812,774,1103,771,724,725,457,365,457,838,500,500,675,"
    "716,593,716,678,435,716,712,343,343,665,343,1042,712,687,716,716,493,595,478,712,652,924,"
    "645,652,582,712,365,712,838,838,380,438,438,1000,500,1000,500,838,838,736,633"
)
_WIDTHS = {
    False: dict(zip(_MEASURED, map(int, _REGULAR.split(",")), strict=True)),
    True: dict(zip(_MEASURED, map(int, _BOLD.split(",")), strict=True)),
}


def _char_width(ch: str, bold: bool) -> int:
    w = _WIDTHS[bold].get(ch)
    if w is not None:
        return w
    if unicodedata.combining(ch):
        return 0
    if unicodedata.east_asian_width(ch) in ("W", "F"):
        return 1000
    return 700 if bold else 640  # an upper bound for most letters of other scripts


def text_width(text: str, size: float, bold: bool = False) -> float:
    """Width of ``text`` at font size ``size`` (user units), DejaVu Sans advance widths."""
    return sum(_char_width(ch, bold) for ch in text) * size / 1000.0


def esc(text: object) -> str:
    """Caller text for an SVG text node or attribute: invisible and XML-invalid characters
    shown as ``U+XXXX``, markup characters escaped."""
    return html.escape(visible(str(text)), quote=True)


def num(v: float) -> str:
    """A coordinate with at most one decimal and no trailing zero (``12``, ``3.5``, ``-0.5``)."""
    s = f"{v:.1f}"
    if s.endswith(".0"):
        s = s[:-2]
    return "0" if s == "-0" else s


def wrap(text: str, width: float, size: float, bold: bool = False) -> list[str]:
    """Greedy word wrap of ``text`` to lines no wider than ``width``; a word wider than a line
    is cut between characters.  Returns no line for empty text."""
    words = text.split()
    lines: list[str] = []
    line = ""
    space = text_width(" ", size, bold)
    used = 0.0
    for word in words:
        w = text_width(word, size, bold)
        if line and used + space + w <= width:
            line, used = f"{line} {word}", used + space + w
            continue
        if line:
            lines.append(line)
        while w > width and len(word) > 1:  # cut a word that fits no line
            cut, taken = 1, _char_width(word[0], bold) * size / 1000.0
            while cut < len(word):
                step = _char_width(word[cut], bold) * size / 1000.0
                if taken + step > width:
                    break
                taken += step
                cut += 1
            lines.append(word[:cut])
            word = word[cut:]
            w = text_width(word, size, bold)
        line, used = word, w
    if line:
        lines.append(line)
    return lines


def fit_line(text: str, width: float, size: float, smallest: float) -> tuple[str, float]:
    """(text, size) that fit ``width`` on one line: the size shrinks down to ``smallest``, then
    the text is cut in the middle with an ellipsis."""
    w = text_width(text, size)
    if w <= width:
        return text, size
    size = max(smallest, size * width / w)
    if text_width(text, size) <= width:
        return text, size
    keep = len(text)
    while (
        keep > 2
        and text_width(text[: keep // 2] + "…" + text[len(text) - keep // 2 :], size) > width
    ):
        keep -= 1
    half = keep // 2
    return text[:half] + "…" + text[len(text) - half :], size


# ------------------------------------------------------------------------------ ticks
def ticks(lo: float, hi: float, bins: int, integer: bool = False) -> np.ndarray:
    """Round tick values inside [lo, hi] (matplotlib's MaxNLocator, steps 1-2-2.5-5-10)."""
    if not (math.isfinite(lo) and math.isfinite(hi)) or hi <= lo:
        return np.array([lo]) if math.isfinite(lo) else np.array([])
    locator = MaxNLocator(nbins=bins, steps=[1, 2, 2.5, 5, 10], integer=integer)
    values = np.asarray(locator.tick_values(lo, hi), dtype=float)
    tol = 1e-9 * (hi - lo)
    return values[(values >= lo - tol) & (values <= hi + tol)]


def tick_labels(values: np.ndarray) -> list[str]:
    """Labels with the fewest decimals that write every tick exactly (minus sign U+2212)."""
    if values.size == 0:
        return []
    big = float(np.max(np.abs(values)))
    step = float(np.min(np.diff(values))) if values.size > 1 else (abs(float(values[0])) or 1.0)
    if big >= 1e6 or (0 < step < 1e-4):
        out = [f"{v:.3g}" for v in values]
    else:
        decimals = 0
        while decimals < 8 and np.any(
            np.abs(np.round(values, decimals) - values) > 1e-9 * max(step, 1e-300)
        ):
            decimals += 1
        out = [f"{v:.{decimals}f}" for v in values]
    return [(s.lstrip("-") if set(s) <= {"-", "0", "."} else s).replace("-", "−") for s in out]


# ------------------------------------------------------------------------------ paths
def _tenths(values: np.ndarray) -> list[int]:
    out: list[int] = np.round(np.asarray(values, dtype=float) * 10.0).astype(np.int64).tolist()
    return out


def _tenths_array(values: np.ndarray) -> np.ndarray:
    out: np.ndarray = np.round(np.asarray(values, dtype=float) * 10.0).astype(np.int64)
    return out


def _join(values: Iterable[int]) -> str:
    """Integers as path numbers: a space before each one unless its minus sign separates it."""
    return "".join(f" {v}" if v >= 0 else str(v) for v in values).lstrip()


def _moves(dx: list[int], dy: list[int], sep: str) -> list[str]:
    """``{sep}dx dy`` per pair as :func:`_join` writes it, one f-string a pair."""
    return [f"{sep}{u}{' ' if v >= 0 else ''}{v}" for u, v in zip(dx, dy, strict=True)]


def dots(px: np.ndarray, py: np.ndarray) -> str:
    """Path data (tenths of a pixel) of one zero-length sub-path per point: ``M x y h0 m dx dy
    h0 ...``; stroked with round caps, each is a dot.  Points keep their order."""
    if len(px) == 0:
        return ""
    x, y = _tenths_array(px), _tenths_array(py)
    head = f"M{_join((int(x[0]), int(y[0])))}h0"
    moves = _moves(np.diff(x).tolist(), np.diff(y).tolist(), "m")
    return head + "h0".join(moves) + ("h0" if moves else "")


def stems(px: np.ndarray, top: np.ndarray, base: float) -> str:
    """Path data (tenths of a pixel) of vertical segments from ``base`` up to each ``top``."""
    if len(px) == 0:
        return ""
    x, t = _tenths_array(px), _tenths_array(top)
    b = _tenths(np.array([base]))[0]
    parts = [f"M{_join((int(x[0]), b))}V{int(t[0])}"]
    back = (b - t[:-1]).tolist()
    parts += [
        f"{m}V{v}"
        for m, v in zip(_moves(np.diff(x).tolist(), back, "m"), t[1:].tolist(), strict=True)
    ]
    return "".join(parts)


def simplify(px: np.ndarray, py: np.ndarray, tolerance: float = 0.25) -> np.ndarray:
    """Indices of the vertices Ramer-Douglas-Peucker keeps at ``tolerance`` pixels.

    The segments still to split are handled together, one level of the recursion at a
    time (the rule splits each segment independently of the others, so the kept vertices
    are those of the one-segment-at-a-time recursion; the tests compare both)."""
    n = len(px)
    if n <= 2:
        return np.arange(n)
    px, py = np.asarray(px, dtype=float), np.asarray(py, dtype=float)
    keep = np.zeros(n, dtype=bool)
    keep[0] = keep[-1] = True
    a = np.array([0])
    b = np.array([n - 1])
    while a.size:
        inner = b - a - 1
        a, b, inner = a[inner > 0], b[inner > 0], inner[inner > 0]
        if not a.size:
            break
        seg = np.repeat(np.arange(a.size), inner)
        starts = np.concatenate([[0], np.cumsum(inner)[:-1]])
        at = np.arange(seg.size) - starts[seg] + a[seg] + 1  # the inner vertices
        sx, sy = px[at] - px[a][seg], py[at] - py[a][seg]
        dx, dy = px[b] - px[a], py[b] - py[a]
        norm = np.array([math.hypot(u, v) for u, v in zip(dx.tolist(), dy.tolist(), strict=True)])
        with np.errstate(divide="ignore", invalid="ignore"):
            dist = np.where(
                norm[seg] == 0,
                np.hypot(sx, sy),
                np.abs(dx[seg] * sy - dy[seg] * sx) / norm[seg],
            )
        top = np.maximum.reduceat(dist, starts)
        # the first vertex of each segment at its largest distance (np.argmax's choice)
        hit = np.flatnonzero(dist == top[seg])
        first_seg, first = np.unique(seg[hit], return_index=True)
        split = first_seg[top[first_seg] > tolerance]
        k = at[hit[first]][top[first_seg] > tolerance]
        keep[k] = True
        a, b = np.concatenate([a[split], k]), np.concatenate([k, b[split]])
    return np.flatnonzero(keep)


def polyline(px: np.ndarray, py: np.ndarray, close: bool = False) -> str:
    """Path data (tenths of a pixel) of one line through the points, simplified first."""
    px, py = np.asarray(px, dtype=float), np.asarray(py, dtype=float)
    if len(px) < 2:
        return ""
    at = simplify(px, py)
    x, y = _tenths_array(px[at]), _tenths_array(py[at])
    steps = "".join(
        f"{' ' if u >= 0 else ''}{u}{' ' if v >= 0 else ''}{v}"
        for u, v in zip(np.diff(x).tolist(), np.diff(y).tolist(), strict=True)
    ).lstrip()
    return f"M{_join((int(x[0]), int(y[0])))}l{steps}" + ("z" if close else "")


def attrs(**values: object) -> str:
    """`` name="value"`` pairs (underscores become hyphens); None values are left out."""
    return "".join(f' {k.replace("_", "-")}="{v}"' for k, v in values.items() if v is not None)


def text(
    x: float,
    y: float,
    content: str,
    size: float,
    fill: str,
    anchor: str = "start",
    bold: bool = False,
    rotate: bool = False,
) -> str:
    """One ``<text>`` at baseline point (x, y); ``content`` is escaped here."""
    place = (
        f' transform="translate({num(x)} {num(y)}) rotate(-90)"'
        if rotate
        else f' x="{num(x)}" y="{num(y)}"'
    )
    extra = attrs(
        text_anchor=None if anchor == "start" else anchor,
        font_weight="bold" if bold else None,
    )
    return f'<text{place} font-size="{num(size)}" fill="{fill}"{extra}>{esc(content)}</text>'


def lines_of_text(
    x: float,
    y: float,
    lines: Sequence[str],
    size: float,
    leading: float,
    fill: str,
    anchor: str = "start",
    bold: bool = False,
) -> str:
    """Several ``<text>`` lines, the first baseline at ``y``."""
    return "".join(
        text(x, y + k * leading, line, size, fill, anchor, bold) for k, line in enumerate(lines)
    )
