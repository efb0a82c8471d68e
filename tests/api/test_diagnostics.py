"""POST /v1/diagnostics over HTTP: one specification's entry, conditions and plots."""

import io
import xml.etree.ElementTree as ET

import numpy as np
import pytest
import statsmodels.api as sm
from fastapi.testclient import TestClient
from matplotlib import image as mpimg
from service.app import app

URL = "/v1/diagnostics"
CONDITIONS = (
    "linearity",
    "normality",
    "equal_variance",
    "independence",
    "multicollinearity",
    "influence",
)


@pytest.fixture(scope="module")
def client():
    return TestClient(app)


def _engel(spec_resp="identity", spec_pred="identity", order=False):
    d = sm.datasets.engel.load_pandas().data
    cols = {"foodexp": d.foodexp.tolist(), "income": d.income.tolist()}
    body = {
        "data": {"columns": cols},
        "specification": {
            "response": {"column": "foodexp", "transform": {"name": spec_resp}},
            "predictors": [{"column": "income", "transform": {"name": spec_pred}}],
        },
    }
    if order:
        cols["t"] = list(range(len(d)))
        body["order"] = "t"
    return body


def test_engel_level_model_flags_unequal_variance_and_influence(client):
    r = client.post(URL, json=_engel())
    assert r.status_code == 200, r.text
    j = r.json()
    assert set(CONDITIONS) <= set(j["conditions"])
    ev = j["conditions"]["equal_variance"]
    bp = next(t for t in ev["tests"] if t["name"].startswith("Breusch-Pagan"))
    # source: CHECKS_PUBLIC engel `foodexp on income`: BP Koenker LM 109.263, p 1.421e-25
    assert bp["statistic"] == pytest.approx(109.263, rel=1e-5)
    assert ev["holds"] is False
    # source: CHECKS_PUBLIC engel: max Cook's D 9.27649 at 0-based label 137 must be flagged
    # (> 1); rows are numbered from 1, so it is row 138 in every output
    inf = j["conditions"]["influence"]
    assert inf["holds"] is False
    assert inf["flagged_rows"][0]["row"] == 138
    cook = next(t for t in inf["tests"] if t["name"].startswith("Cook"))
    assert cook["row"] == 138 and "row 138" in inf["note"]
    assert {lab["row"] for lab in j["plots"]["influence"]["labels"]} >= {138}
    assert 138 in j["plots"]["influence"]["points"]["row"]
    assert j["plots"]["influence"]["x_label"] == "Row (1 = first data row)"
    assert j["conditions"]["independence"]["holds"] is None  # no order column
    assert set(j["plots"]) == {
        "residuals_fitted",
        "normal_quantiles",
        "spread_fitted",
        "influence",
        "partial_residuals",
    }
    assert len(j["plots"]["partial_residuals"]) == 1
    assert "rank" not in j


def test_order_column_enables_independence_tests(client):
    r = client.post(URL, json=_engel(order=True))
    ind = r.json()["conditions"]["independence"]
    names = [t["name"] for t in ind["tests"]]
    assert any(n.startswith("Durbin-Watson") for n in names)
    assert ind["holds"] in (True, False)
    dw = next(t for t in ind["tests"] if t["name"].startswith("Durbin-Watson"))
    # source: CHECKS_PUBLIC engel `foodexp on income`: DW 1.41075 in loader order
    assert dw["statistic"] == pytest.approx(1.41075, rel=1e-5)


def test_svg_figure_has_every_panel(client):
    r = client.post(URL, json=_engel("log", "log"), headers={"accept": "image/svg+xml"})
    assert r.status_code == 200
    assert r.headers["content-type"].startswith("image/svg+xml")
    root = ET.fromstring(r.content)
    text = " ".join(
        t.text or "" for t in root.iter() if t.tag.endswith("text") or t.tag.endswith("tspan")
    )
    for title in (
        "Is the scale straight?",
        "Is the spread even?",
        "Are the residuals close to normal?",
        "Which rows pull the fit?",
    ):
        assert title in text
    # source: statsmodels' engel data (235 households): every row is one dot of each panel
    n = len(sm.datasets.engel.load_pandas().data)
    for panel in root.iter():
        if panel.get("id") in ("panel-straight", "panel-spread", "panel-predictor_scale-1"):
            dots = [e.get("d") for e in panel.iter() if e.get("class") == "pts"]
            assert sum(d.count("h0") for d in dots) == n == 235


def test_png_figure_is_a_non_blank_picture(client):
    r = client.post(URL, json=_engel("log", "log"), headers={"accept": "image/png"})
    assert r.status_code == 200 and r.headers["content-type"] == "image/png"
    img = mpimg.imread(io.BytesIO(r.content), format="png")
    assert img.shape[0] > 300 and img.shape[1] > 600
    assert float(np.std(img[..., :3])) > 0.05


def test_out_of_domain_transform_points_into_the_specification(client):
    body = _engel()
    body["specification"]["predictors"][0]["transform"] = {"name": "log", "shift": -1000.0}
    r = client.post(URL, json=body)
    assert r.status_code == 422
    # the first pointer names the first row the transform cannot take, the second the transform
    assert r.json()["errors"][0]["pointer"] == "/data/columns/income/0"
    assert r.json()["errors"][1]["pointer"] == "/specification/predictors/0/transform"


def test_unknown_column_in_specification(client):
    body = _engel()
    body["specification"]["predictors"][0]["column"] = "wages"
    r = client.post(URL, json=body)
    assert r.status_code == 422
    assert r.json()["errors"][0]["pointer"] == "/specification/predictors/0/column"


def test_column_names_with_markup_characters_are_drawn_as_text(client):
    # a pair of '$' would be read as mathtext and crash the renderer
    rng = np.random.default_rng(0)
    x = rng.uniform(1, 5, 40)
    y = 2 * x + rng.normal(0, 0.3, 40)
    name = "x $^{$ & y"
    body = {
        "data": {"columns": {"y": y.tolist(), name: x.tolist()}},
        "specification": {"response": {"column": "y"}, "predictors": [{"column": name}]},
    }
    r = client.post(URL, json=body, headers={"accept": "image/svg+xml"})
    assert r.status_code == 200
    ET.fromstring(r.content)
