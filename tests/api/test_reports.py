"""POST /v1/reports over HTTP: the selection as one self-contained, well-formed HTML page."""

import re
import xml.etree.ElementTree as ET

import numpy as np
import pytest
import statsmodels.api as sm
from fastapi.testclient import TestClient
from service.api.reports import wants_html
from service.app import app
from service.demo import demo_request
from service.report.html import inline_svg, num
from service.selection.plots import DETAIL_TOP

from tests.browser.report_case import demo_report, report_request

URL = "/v1/reports"
PANEL_TITLES = (
    "Is the scale straight?",
    "Is the spread even?",
    "Are the residuals close to normal?",
    "Which rows pull the fit?",
)
NUMBER = re.compile(r"-?[\d,]*\.?\d+(?:e-?\d+)?")
# 4 significant digits: the rounding error is at most half a unit in the 4th digit
FOUR_DIGITS = 5.0001e-4


@pytest.fixture(scope="module")
def client():
    return TestClient(app)


@pytest.fixture(scope="module")
def answers():
    """(the page, its parsed tree, the JSON response of /v1/selections to the same body)."""
    page, body = demo_report()
    return page, ET.fromstring(page.text), body


def _cls(root, tag: str, cls: str) -> list:
    return [e for e in root.iter(tag) if cls in (e.get("class") or "").split()]


def _by_id(root, ident: str):
    return next(e for e in root.iter() if e.get("id") == ident)


def _text(e) -> str:
    return "".join(e.itertext()).strip()


def _numbers(text: str) -> list[float]:
    return [float(m.replace(",", "")) for m in NUMBER.findall(text)]


def _local(tag: str) -> str:
    return tag.rsplit("}", 1)[-1]


# ------------------------------------------------------------------ the page
def test_page_is_well_formed_self_contained_html(answers):
    page, root, _ = answers
    assert page.headers["content-type"].startswith("text/html")
    assert "default-src 'none'" in page.headers["content-security-policy"]
    assert page.text.startswith("<!DOCTYPE html>")
    assert root.tag == "html" and root.get("lang") == "en"  # ElementTree parsed it: well-formed
    text = page.text
    assert not re.search(r"<script|javascript:|@import|<link\b|<iframe|<object|<embed", text, re.I)
    assert not re.search(r"https?://|//[a-z0-9.-]+\.[a-z]{2,}/", text, re.I)  # no URL at all
    assert not re.search(r"\son[a-z]+\s*=", text, re.I)  # no event handler attributes
    _assert_links_resolve(root, text)


def _assert_links_resolve(root, text: str) -> None:
    ids = [e.get("id") for e in root.iter() if e.get("id")]
    assert len(ids) == len(set(ids)), "ids must be unique across sections and inline figures"
    for e in root.iter():
        assert e.get("src") is None
        href = e.get("href")
        if href is not None:  # only links within the page, and they resolve
            assert href.startswith("#") and href[1:] in ids, href
    for ref in re.findall(r"url\(#([^)]+)\)", text):
        assert ref in ids


def test_every_figure_is_present_with_its_panels(answers):
    _, root, body = answers
    shown = body["ranking"][:DETAIL_TOP]
    figures = _cls(root, "figure", "panels")
    assert len(figures) == len(shown) == 3
    for entry, fig in zip(shown, figures, strict=True):
        svg = next(e for e in fig if _local(e.tag) == "svg")
        words = " ".join(_text(t) for t in svg.iter() if _local(t.tag) == "text")
        for title in PANEL_TITLES:
            assert title in words
        for p in entry["specification"]["predictors"]:  # one component+residual panel each
            if p["transform"]["name"] != "categorical":
                assert f"Is the scale of {p['column']} right?" in words
        assert entry["equation"] in words  # the figure is titled with its own equation
        # every row is a dot in each panel: one zero-length sub-path ("h0") per point
        for panel in svg.iter():
            if _local(panel.tag) == "g" and (panel.get("id") or "").endswith(
                ("-panel-straight", "-panel-influence")
            ):
                dots = [e.get("d") for e in panel.iter() if e.get("class") == "pts"]
                assert sum(d.count("h0") for d in dots) == body["data"]["rows_used"]
        assert _text(fig.find("figcaption"))


def test_figure_is_the_one_diagnostics_draws(client, answers):
    """One code path: the rank-1 figure equals /v1/diagnostics' SVG for that specification."""
    _, root, body = answers
    req = report_request()
    entry = body["ranking"][0]
    r = client.post(
        "/v1/diagnostics",
        headers={"accept": "image/svg+xml"},
        json={
            "data": req["data"],
            "specification": entry["specification"],
            "validation": req["validation"],
            "alpha": 0.05,
        },
    )
    assert r.status_code == 200
    inlined = inline_svg(r.content, "rank-1-fig", f"Diagnostic panels for {entry['equation']}")
    svg = next(e for e in _by_id(root, "rank-1-fig") if _local(e.tag) == "svg")
    assert ET.tostring(svg, encoding="unicode") == ET.tostring(
        ET.fromstring(inlined), encoding="unicode"
    )


def test_ranking_numbers_equal_the_json_response(answers):
    _, root, body = answers
    rows = _cls(root, "table", "ranking")[0].find("tbody").findall("tr")
    assert len(rows) == len(body["ranking"])
    for tr, entry in zip(rows, body["ranking"], strict=True):
        cells = tr.findall("td")
        assert _text(cells[0]) == str(entry["rank"])
        cv = entry["cv"]
        shown = _numbers(_text(cells[2]))
        # source: the JSON response to the same request (same data, same seed)
        assert shown == pytest.approx([cv["value"], cv["std_error"]], rel=FOUR_DIGITS)
        assert _text(cells[2]) == f"{num(cv['value'])} \u00b1\u00a0{num(cv['std_error'])}"
        marks = [_text(c) for c in cells[5:]]
        for (name, cond), mark in zip(entry["conditions"].items(), marks, strict=True):
            word = {True: "holds", False: "fails", None: "not tested"}[cond["holds"]]
            assert mark.endswith(word), (name, mark)  # accessible text, not colour alone
    assert body["ranking"][0]["specification"]["response"]["transform"]["name"] == "log"


def test_coefficients_equal_the_json_response_and_statsmodels(answers):
    _, root, body = answers
    for entry in body["ranking"][:DETAIL_TOP]:
        section = _by_id(root, f"rank-{entry['rank']}")
        table = _cls(section, "table", "coefficients")[0]
        got = {_text(tr[0]): _text(tr[1]) for tr in table.find("tbody")}
        want = {c["term"]: c["estimate"] for c in entry["coefficients"]}
        assert set(got) == set(want)
        for term, text in got.items():
            # source: the JSON response to the same request
            assert float(text.replace(",", "")) == pytest.approx(want[term], rel=FOUR_DIGITS)
            assert text == num(want[term])
    # source: statsmodels OLS of log(cost) on log(length), age and soil dummies (clay
    # baseline), the scale the demo data were generated on (service/demo docstring)
    cols = report_request()["data"]["columns"]
    soil = np.asarray(cols["soil"])
    X = sm.add_constant(
        np.column_stack(
            [np.log(cols["pipe_length_m"]), cols["pipe_age_years"], soil == "loam", soil == "sand"]
        ).astype(float)
    )
    ref = sm.OLS(np.log(cols["repair_cost"]), X).fit()
    section = _by_id(root, "rank-1")
    table = _cls(section, "table", "coefficients")[0]
    shown = [float(_text(tr[1]).replace(",", "")) for tr in table.find("tbody")]
    assert shown == pytest.approx(ref.params.tolist(), rel=FOUR_DIGITS)
    ses = [float(_text(tr[2]).replace(",", "")) for tr in table.find("tbody")]
    assert ses == pytest.approx(ref.bse.tolist(), rel=FOUR_DIGITS)


def test_summary_interpretation_incumbent_and_cautions_are_shown(answers):
    page, root, body = answers
    text = _text(_by_id(root, "summary"))
    d = body["data"]
    assert (
        f"{d['rows_received']} received, {d['rows_used']} used, {d['rows_dropped']} dropped" in text
    )
    s = body["search"]
    assert (
        f"{s['candidates_considered']} candidate specifications, {s['candidates_scored']} scored"
        in text
    )
    inc = _text(_by_id(root, "incumbent"))
    assert body["incumbent"]["decision"].upper() in inc
    assert body["incumbent"]["reason"] in inc
    assert _numbers(inc.split("Rank 1 minus incumbent")[1])[:2] == pytest.approx(
        [body["incumbent"]["difference"]["value"], body["incumbent"]["difference"]["std_error"]],
        rel=FOUR_DIGITS,
    )
    detail = _text(_by_id(root, "rank-1"))
    for sentence in body["ranking"][0]["interpretation"]:
        assert sentence in detail
    cautions = [_text(li) for li in _by_id(root, "cautions").iter("li")]
    assert cautions == body["cautions"]
    if body["warnings"]:
        assert [_text(li) for li in _by_id(root, "warnings").iter("li")] == body["warnings"]
    else:
        assert 'id="warnings"' not in page.text


def test_search_notes_and_entry_notes_have_distinct_headings(answers):
    """Notes on the whole search stand apart from a specification's own points to check:
    different headings in our words, and the search notes come before the ranking."""
    import copy

    from service.report.html import render_report

    _, _, body = answers
    body = copy.deepcopy(body)
    body["warnings"] = ["a note on the whole search"]
    for entry in body["ranking"]:
        entry["warnings"] = [f"a point to check in rank {entry['rank']}"]
    plots = {(None, e["rank"]): "not drawn in this test" for e in body["ranking"][:2]}
    root = ET.fromstring(render_report(body, plots))
    headings = [(_local(e.tag), _text(e)) for e in root.iter() if _local(e.tag) in ("h2", "h3")]
    texts = [t for _, t in headings]
    assert "Warnings" not in texts
    assert texts.count("About the search as a whole") == 1
    assert "Points to check in this specification" in texts
    section = _by_id(root, "warnings")
    assert [_text(li) for li in section.iter("li")] == body["warnings"]
    assert texts.index("About the search as a whole") < texts.index("Ranking")
    for li in section.iter("li"):
        assert "rank" not in _text(li)  # no entry's point to check is listed with the search's


def test_caller_strings_are_escaped(client):
    rng = np.random.default_rng(7)
    n = 60
    x = rng.uniform(1.0, 50.0, n)
    site = rng.choice(["<script>alert('x')</script>", 'north & "south"'], n)
    y = np.exp(1.0 + 0.5 * np.log(x) + 0.3 * (site == 'north & "south"') + rng.normal(0, 0.2, n))
    resp, pred = 'cost "net" <eur>', "length & <width>"
    r = client.post(
        URL,
        json={
            "data": {"columns": {resp: y.tolist(), pred: x.tolist(), "site": site.tolist()}},
            "response": resp,
            "predictors": [pred, "site"],
            "top": 1,
            "transforms": {"response": ["identity", "log"], "predictors": ["identity", "log"]},
        },
    )
    assert r.status_code == 200, r.text
    root = ET.fromstring(r.text)  # still well-formed
    assert "<script" not in r.text.lower()
    assert "&lt;script&gt;alert(&#x27;x&#x27;)&lt;/script&gt;" in r.text
    assert "cost &quot;net&quot; &lt;eur&gt;" in r.text
    assert resp in _text(root.find(".//h1")) and pred in _text(_by_id(root, "summary"))
    assert len(_cls(root, "figure", "panels")) == 1


def test_group_by_gives_one_section_per_group(client):
    req = demo_request()
    cols = {k: v[:120] for k, v in req["data"]["columns"].items()}
    cols["district"] = ["east" if i % 2 else "west" for i in range(120)]
    req["data"] = {"columns": cols}
    req.update(
        group_by="district",
        top=2,
        predictors=["pipe_length_m", "pipe_age_years"],
        transforms={"response": ["identity", "log"], "predictors": ["identity", "log"]},
        incumbent={
            "response": {"column": "repair_cost"},
            "predictors": [{"column": "pipe_length_m"}, {"column": "pipe_age_years"}],
        },
    )
    r = client.post(URL, json=req)
    assert r.status_code == 200, r.text
    root = ET.fromstring(r.text)
    _assert_links_resolve(root, r.text)
    body = client.post("/v1/selections", json=req).json()
    groups = _cls(root, "section", "group")
    assert [_text(g.find("h2")) for g in groups] == [f"Group {k}" for k in body["groups"]]
    for i, (_name, gbody) in enumerate(body["groups"].items()):
        table = _cls(groups[i], "table", "ranking")[0]
        first = table.find("tbody").find("tr").findall("td")
        cv = gbody["ranking"][0]["cv"]
        # source: the JSON response to the same request
        assert _numbers(_text(first[2])) == pytest.approx(
            [cv["value"], cv["std_error"]], rel=FOUR_DIGITS
        )
        assert len(_cls(groups[i], "figure", "panels")) == 1  # rank 1 of each group
        decision = _cls(_by_id(groups[i], f"g{i + 1}-incumbent"), "span", "badge")[0]
        assert _text(decision) == gbody["incumbent"]["decision"].upper()


@pytest.mark.parametrize(
    "body, pointer",
    [
        pytest.param({"response": "y", "predictors": ["x"]}, "/data", id="no-data"),
        pytest.param(
            {
                "data": {"columns": {"y": [1, 2, 3], "x": [1, 2, 3]}},
                "response": "nope",
                "predictors": ["x"],
            },
            "/response",
            id="unknown-response",
        ),
    ],
)
def test_bad_input_is_a_problem_not_a_page(client, body, pointer):
    r = client.post(URL, json=body)
    assert r.status_code in (400, 422)
    assert r.headers["content-type"].startswith("application/problem+json")
    assert pointer in [e["pointer"] for e in r.json()["errors"]]


def test_wrong_content_type_is_415(client):
    r = client.post(URL, content=b"y,x\n1,2\n", headers={"content-type": "text/csv"})
    assert r.status_code == 415


@pytest.mark.parametrize(
    "accept, html",
    [
        pytest.param(
            "text/html,application/xhtml+xml,application/xml;q=0.9,*/*;q=0.8", True, id="browser"
        ),
        pytest.param("text/html", True, id="html"),
        pytest.param("*/*", False, id="anything"),
        pytest.param("", False, id="none"),
        pytest.param("application/json, text/html", False, id="tie-keeps-json"),
        pytest.param("text/html;q=0.5, application/json", False, id="json-preferred"),
        pytest.param("application/json;q=0.2, text/html;q=0.9", True, id="html-preferred"),
        pytest.param("text/html;q=0", False, id="html-refused"),
    ],
)
def test_accept_negotiation(accept, html):
    # source: RFC 9110 section 12.5.1 (media ranges and q-values)
    assert wants_html(accept) is html


def test_selections_answer_html_when_asked(client):
    import re

    from service.demo import demo_request

    req = demo_request()
    req.update(
        top=1, transforms={"response": ["identity", "log"], "predictors": ["identity", "log"]}
    )
    page = client.post("/v1/selections", json=req, headers={"accept": "text/html"})
    assert page.status_code == 200
    assert page.headers["content-type"].startswith("text/html")
    same = client.post("/v1/reports", json=req).text

    def drop(t):
        return re.sub(r"<dt>Search time</dt><dd>[^<]*</dd>", "", t)

    assert drop(page.text) == drop(same)
    plain = client.post("/v1/selections", json=req)
    assert plain.headers["content-type"].startswith("application/json")
