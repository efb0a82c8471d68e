"""The report in a real browser: loads offline with no request and no console error, and
what it draws is on the screen (a screenshot whose pixels are checked)."""

import io
import re

import numpy as np
import pytest
from PIL import Image

from tests.browser.report_case import demo_report

VIEWPORT = {"width": 1280, "height": 900}
# A4 portrait less 12 mm margins is about 186 mm, i.e. ~700 CSS pixels
PRINT_VIEWPORT = {"width": 700, "height": 1000}


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    """The demo report saved to disk, and the JSON body of the same selection."""
    page, body = demo_report()
    path = tmp_path_factory.mktemp("report") / "report.html"
    path.write_bytes(page.content)
    return path, body


def _watch(page) -> dict:
    seen = {"console": [], "errors": [], "requests": []}
    page.on("console", lambda m: seen["console"].append((m.type, m.text)))
    page.on("pageerror", lambda e: seen["errors"].append(str(e)))
    page.on("request", lambda r: seen["requests"].append(r.url))
    return seen


def _outside(urls: list[str], own: str) -> list[str]:
    return [u for u in urls if u != own and not u.startswith(("data:", "about:"))]


def _rgb(png: bytes) -> np.ndarray:
    with Image.open(io.BytesIO(png)) as img:
        return np.asarray(img.convert("RGB"), dtype=np.int16)


@pytest.fixture(scope="module")
def loaded(browser, report):
    """The page opened from disk in an offline browser context, plus what it did."""
    path, body = report
    context = browser.new_context(viewport=VIEWPORT, offline=True)
    page = context.new_page()
    seen = _watch(page)
    page.goto(path.as_uri(), wait_until="load")
    yield page, seen, body, path
    context.close()


def test_loads_offline_with_no_request_and_no_console_error(loaded):
    page, seen, _, path = loaded
    assert seen["errors"] == []
    assert [m for m in seen["console"] if m[0] in ("error", "warning")] == []
    assert _outside(seen["requests"], path.as_uri()) == []
    assert page.title().startswith("Scale selection for repair_cost")


def test_screenshot_shows_every_figure(loaded, tmp_path):
    page, _, body, _ = loaded
    png = page.screenshot(full_page=True)
    (tmp_path / "report.png").write_bytes(png)
    rgb = _rgb(png)
    height = page.evaluate("document.documentElement.scrollHeight")
    assert rgb.shape[0] == height and rgb.shape[1] == VIEWPORT["width"]
    assert page.evaluate("document.documentElement.scrollWidth") <= VIEWPORT["width"]
    figures = page.get_by_role("img", name=re.compile("^Diagnostic panels for "))
    assert figures.count() == min(3, len(body["ranking"])) == 3
    total = 0.0
    for i in range(figures.count()):
        svg = figures.nth(i)
        assert svg.is_visible()
        box = svg.bounding_box()
        vb = [float(v) for v in svg.get_attribute("viewBox").split()]
        assert box["width"] > 0.6 * VIEWPORT["width"]  # spans the text column
        assert box["height"] / box["width"] == pytest.approx(vb[3] / vb[2], rel=0.02)
        total += box["height"]
        x0, y0 = int(box["x"]), int(box["y"])
        crop = rgb[y0 : y0 + int(box["height"]), x0 : x0 + int(box["width"])]
        r, g, b = crop[..., 0], crop[..., 1], crop[..., 2]
        assert np.mean(crop.sum(axis=2) < 3 * 245) > 0.02  # not blank
        assert np.sum((b - r > 50) & (b > g)) > 300  # the blue markers of the data
        assert np.sum((r - b > 90) & (r > g)) > 50  # the orange smoothers
    assert height > total + 1500  # tables and text besides the figures
    assert np.mean(rgb.sum(axis=2) < 3 * 245) > 0.03


def test_marks_and_tables_are_readable_without_colour(loaded):
    page, _, body, _ = loaded
    rows = page.locator("table.ranking tbody tr")
    assert rows.count() == len(body["ranking"])
    hidden = page.locator("table.ranking tbody tr").first.locator(".vh").all_text_contents()
    words = {True: "holds", False: "fails", None: "not tested"}
    assert hidden == [
        f"{label}: {words[c['holds']]}"
        for label, c in zip(
            (
                "Linearity",
                "Normal residuals",
                "Equal variance",
                "Independence",
                "Collinearity",
                "Influence",
            ),
            body["ranking"][0]["conditions"].values(),
            strict=True,
        )
    ]
    decision = page.locator("#incumbent .badge").inner_text()
    assert decision == body["incumbent"]["decision"].upper()


def test_print_layout_fits_paper(browser, report):
    path, _ = report
    context = browser.new_context(viewport=PRINT_VIEWPORT, offline=True)
    page = context.new_page()
    page.goto(path.as_uri(), wait_until="load")
    page.emulate_media(media="print")
    assert page.locator("nav").is_hidden()
    assert page.evaluate("document.documentElement.scrollWidth") <= PRINT_VIEWPORT["width"]
    breaks = page.eval_on_selector_all(
        "section.detail", "els => els.map(e => getComputedStyle(e).breakBefore)"
    )
    assert breaks == ["page"] * 3
    context.close()


def test_works_inside_an_iframe(browser, report):
    path, _ = report
    host = path.with_name("dashboard.html")
    host.write_text(
        '<!DOCTYPE html><title>dashboard</title><iframe title="report" '
        f'width="1200" height="800" src="{path.name}"></iframe>'
    )
    context = browser.new_context(viewport=VIEWPORT, offline=True)
    page = context.new_page()
    seen = _watch(page)
    page.goto(host.as_uri(), wait_until="load")
    frame = page.frame_locator("iframe")
    assert frame.get_by_role("img", name=re.compile("^Diagnostic panels for ")).count() == 3
    assert frame.locator("h1").inner_text().startswith("On which scale to model")
    assert seen["errors"] == []
    assert [m for m in seen["console"] if m[0] in ("error", "warning")] == []
    assert sorted(seen["requests"]) == sorted([host.as_uri(), path.as_uri()])
    context.close()
