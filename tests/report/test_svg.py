"""The SVG drawing kit (service/report/svg.py): text metrics, escaping, ticks and paths.

References: matplotlib's own text layout from the DejaVu Sans file it ships (widths), Python's
XML parser (well-formed output), the Ramer-Douglas-Peucker guarantee (no dropped vertex lies
farther than the tolerance from the simplified line), and a path decoder written here from the
SVG 1.1 path grammar (section 8.3: relative moveto/lineto, ``h``/``V``).
"""

from __future__ import annotations

import math
import re
import xml.etree.ElementTree as ET

import numpy as np
import pytest
from matplotlib.font_manager import FontProperties
from matplotlib.textpath import TextToPath
from service.report import svg

NUMBER = re.compile(r"-?\d+")


def _decode(d: str) -> list[tuple[str, list[int]]]:
    """Commands and integer arguments of path data (SVG 1.1 section 8.3 grammar subset)."""
    return [
        (m.group(1), [int(v) for v in NUMBER.findall(m.group(2))])
        for m in re.finditer(r"([MmLlHhVvz])([^MmLlHhVvz]*)", d)
    ]


def _dot_points(d: str) -> np.ndarray:
    """Absolute points of a path of zero-length sub-paths (M/m followed by h0)."""
    x = y = 0
    out = []
    for cmd, args in _decode(d):
        if cmd == "M":
            x, y = args
        elif cmd == "m":
            x, y = x + args[0], y + args[1]
        elif cmd == "h":
            assert args == [0]
            out.append((x, y))
    return np.array(out)


@pytest.mark.parametrize("words", ["Residual (model scale)", "0123456789", "Is the spread even?"])
@pytest.mark.parametrize("bold", [False, True])
def test_text_width_matches_matplotlibs_layout_of_the_same_font(words, bold):
    # source: matplotlib's TextToPath layout of DejaVu Sans (FreeType advances with kerning)
    prop = FontProperties(family="DejaVu Sans", size=10, weight="bold" if bold else "normal")
    width, _, _ = TextToPath().get_text_width_height_descent(words, prop, ismath=False)
    assert svg.text_width(words, 10, bold) == pytest.approx(width, rel=0.02)


def test_escaping_is_html_escape_plus_visible_bidi_controls():
    text = '<b onclick="x">R&D</b>\u202e'
    # source: Python's html.escape(quote=True) for the markup characters
    assert svg.esc(text) == "&lt;b onclick=&quot;x&quot;&gt;R&amp;D&lt;/b&gt;U+202E"


def test_escaping_keeps_markup_out_and_shows_hidden_characters():
    hostile = 'a<script>&"\u202e\x01\ud800'
    out = svg.esc(hostile)
    assert "<" not in out and '"' not in out
    assert "U+202E" in out and "U+0001" in out and "U+D800" in out
    # source: Python's XML parser accepts the text node and gives the visible text back
    node = ET.fromstring(f'<t a="{out}">{out}</t>')
    assert node.text == node.get("a") == 'a<script>&"U+202EU+0001U+D800'


def test_numbers_have_one_decimal_at_most():
    assert [svg.num(v) for v in (12.0, 3.14159, -0.04, -2.5, 0.0)] == [
        "12",
        "3.1",
        "0",
        "-2.5",
        "0",
    ]


def test_wrap_keeps_every_word_within_the_width():
    text = "ordered standardised residuals should follow their normal quantiles " * 3
    lines = svg.wrap(text, 200, 10.5)
    assert len(lines) > 3
    assert all(svg.text_width(line, 10.5) <= 200 for line in lines)
    assert " ".join(lines) == " ".join(text.split())
    cut = svg.wrap("x" * 200, 100, 10)  # one word wider than a line is cut
    assert "".join(cut) == "x" * 200 and all(svg.text_width(s, 10) <= 100 for s in cut)
    assert svg.wrap("", 100, 10) == []


def test_fit_line_shrinks_then_cuts_in_the_middle():
    assert svg.fit_line("short", 100, 12, 7) == ("short", 12)
    text, size = svg.fit_line("a" * 30, 130, 12, 7)
    assert text == "a" * 30 and 7 <= size < 12 and svg.text_width(text, size) <= 130
    text, size = svg.fit_line("b" * 50 + "END", 100, 12, 7)
    assert size == 7 and "…" in text and text.endswith("END") and svg.text_width(text, 7) <= 100


@pytest.mark.parametrize(
    "lo, hi", [(0.0, 1.0), (-1.07, 0.74), (6.4, 10.9), (0.0, 0.058), (1.0, 20000.0), (-3e7, 2e7)]
)
def test_ticks_are_round_and_inside(lo, hi):
    values = svg.ticks(lo, hi, 7)
    assert 3 <= values.size <= 9
    assert values.min() >= lo - 1e-9 * (hi - lo) and values.max() <= hi + 1e-9 * (hi - lo)
    step = np.diff(values)
    np.testing.assert_allclose(step, step[0], rtol=1e-9)
    mantissa = step[0] / 10 ** np.floor(np.log10(step[0]))
    assert min(abs(mantissa - m) for m in (1, 2, 2.5, 5, 10)) < 1e-9  # 1-2-2.5-5 steps
    labels = svg.tick_labels(values)
    assert len(set(labels)) == len(labels)  # every tick tells itself apart


def test_tick_labels_share_decimals_and_use_the_minus_sign():
    assert svg.tick_labels(np.array([-0.5, 0.0, 0.5, 1.0])) == ["−0.5", "0.0", "0.5", "1.0"]
    assert svg.tick_labels(np.array([0.0, 0.25, 0.5])) == ["0.00", "0.25", "0.50"]
    assert svg.tick_labels(np.array([0.0, 100.0, 200.0])) == ["0", "100", "200"]
    assert svg.tick_labels(np.array([0.0, 2e6, 4e6])) == ["0", "2e+06", "4e+06"]


def test_dots_decode_to_the_points_in_tenths_of_a_pixel():
    rng = np.random.default_rng(3)
    px, py = rng.uniform(0, 1600, 500), rng.uniform(0, 1300, 500)
    d = svg.dots(px, py)
    back = _dot_points(d)
    np.testing.assert_array_equal(back, np.column_stack([np.round(px * 10), np.round(py * 10)]))
    assert svg.dots(np.array([]), np.array([])) == ""
    assert len(d) / 500 < 16  # a compact point: "m dx dy h0"


def test_stems_run_from_the_base_to_each_top():
    d = svg.stems(np.array([10.0, 12.5, 30.0]), np.array([5.0, 90.0, 40.2]), 100.0)
    x = y = 0
    segments = []
    for cmd, args in _decode(d):
        if cmd == "M":
            x, y = args
        elif cmd == "m":
            x, y = x + args[0], y + args[1]
        elif cmd == "V":
            segments.append((x, y, args[0]))
            y = args[0]
    assert segments == [(100, 1000, 50), (125, 1000, 900), (300, 1000, 402)]


def test_simplified_line_stays_within_the_tolerance():
    x = np.linspace(0, 400, 2000)
    y = 100 + 80 * np.sin(x / 37) + np.random.default_rng(0).normal(0, 0.05, x.size)
    keep = svg.simplify(x, y, 0.25)
    assert keep[0] == 0 and keep[-1] == x.size - 1 and keep.size < 400
    # source: Douglas & Peucker (1973): every dropped vertex lies within the tolerance of the
    # kept segment that spans it (distance to the line through the segment's ends)
    seg = np.searchsorted(keep, np.arange(x.size), side="right") - 1
    a, b = keep[np.minimum(seg, keep.size - 2)], keep[np.minimum(seg + 1, keep.size - 1)]
    dx, dy = x[b] - x[a], y[b] - y[a]
    dist = np.abs(dx * (y - y[a]) - dy * (x - x[a])) / np.hypot(dx, dy)
    assert np.max(dist) <= 0.25 + 1e-9
    d = svg.polyline(x, y)
    cmds = _decode(d)
    assert cmds[0][0] == "M" and cmds[1][0] == "l" and len(cmds[1][1]) == 2 * (keep.size - 1)
    assert svg.polyline(x[:1], y[:1]) == ""


def _rdp_one_at_a_time(px, py, tolerance):
    """Ramer (1972) / Douglas & Peucker (1973) as the recursion is usually written: split a
    segment at its farthest vertex (the first of equals) while that is beyond the tolerance."""
    keep = {0, len(px) - 1}

    def split(a, b):
        if b - a < 2:
            return
        dx, dy = px[b] - px[a], py[b] - py[a]
        norm = math.hypot(dx, dy)
        best, at = -1.0, None
        for k in range(a + 1, b):
            sx, sy = px[k] - px[a], py[k] - py[a]
            dist = math.hypot(sx, sy) if norm == 0 else abs(dx * sy - dy * sx) / norm
            if dist > best:
                best, at = dist, k
        if best > tolerance:
            keep.add(at)
            split(a, at)
            split(at, b)

    split(0, len(px) - 1)
    return sorted(keep)


@pytest.mark.parametrize("seed", range(6))
def test_simplify_keeps_the_vertices_of_the_recursion(seed):
    rng = np.random.default_rng(seed)
    n = [3, 40, 200, 600, 601, 1000][seed]
    x = np.sort(rng.uniform(0, 400, n))
    y = [
        np.cumsum(rng.normal(0, 1, n)),  # a rough walk: most vertices kept
        np.round(100 * np.sin(x / 30), 1),  # a smooth curve with equal distances
    ][seed % 2]
    if seed >= 4:  # a closed band: there and back, and a repeated end (zero-length chord)
        x, y = np.concatenate([x, x[::-1]]), np.concatenate([y, y[::-1] + 5])
        x[-1], y[-1] = x[0], y[0]
    expected = _rdp_one_at_a_time(x.tolist(), y.tolist(), 0.25)
    assert svg.simplify(x, y, 0.25).tolist() == expected


def test_paths_write_each_point_as_the_path_grammar_reads_it():
    rng = np.random.default_rng(5)
    px, py = rng.uniform(-40, 1600, 300), rng.uniform(-40, 1300, 300)
    x, y = np.round(px * 10).astype(int).tolist(), np.round(py * 10).astype(int).tolist()

    def pair(u, v):  # a space before a number unless its minus sign separates it
        return f"{u}{' ' if v >= 0 else ''}{v}"

    expected = f"M{pair(x[0], y[0])}h0" + "".join(
        f"m{pair(x[k] - x[k - 1], y[k] - y[k - 1])}h0" for k in range(1, len(x))
    )
    assert svg.dots(px, py) == expected
    b = 5000
    expected = f"M{pair(x[0], b)}V{y[0]}" + "".join(
        f"m{pair(x[k] - x[k - 1], b - y[k - 1])}V{y[k]}" for k in range(1, len(x))
    )
    assert svg.stems(px, py, 500.0) == expected
    order = np.argsort(px)
    keep = svg.simplify(px[order], py[order])
    xs, ys = [x[i] for i in order[keep]], [y[i] for i in order[keep]]
    steps = "".join(
        f"{' ' if u >= 0 else ''}{pair(u, v)}"
        for u, v in ((xs[k] - xs[k - 1], ys[k] - ys[k - 1]) for k in range(1, len(xs)))
    )
    assert svg.polyline(px[order], py[order]) == f"M{pair(xs[0], ys[0])}l{steps.lstrip()}"


def test_text_elements_are_escaped_and_placed():
    t = svg.text(10, 20.04, "a < b", 12, "#000", "end", bold=True)
    node = ET.fromstring(t)
    assert node.text == "a < b" and node.get("x") == "10" and node.get("y") == "20"
    assert node.get("text-anchor") == "end" and node.get("font-weight") == "bold"
    rotated = ET.fromstring(svg.text(5, 6, "y", 12, "#000", rotate=True))
    assert rotated.get("transform") == "translate(5 6) rotate(-90)"
    assert svg.attrs(stroke_dasharray="1 2", fill=None) == ' stroke-dasharray="1 2"'
    block = ET.fromstring(f"<g>{svg.lines_of_text(0, 10, ['one', 'two'], 10, 12, '#000')}</g>")
    assert [(e.text, e.get("y")) for e in block] == [("one", "10"), ("two", "22")]
