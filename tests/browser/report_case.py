"""One demo report, computed once per test run and shared by the HTML and browser tests.

The request is the shipped demo (invented water-main repair costs) with a smaller search,
an incumbent (last month's untransformed specification) and units, so every part of the
page appears: summary, ranking, three detailed specifications, incumbent and cautions.
"""

from functools import lru_cache

from fastapi.testclient import TestClient
from service.app import app
from service.demo import demo_request


def report_request() -> dict:
    req = demo_request()
    req["transforms"] = {"response": ["identity", "log", "sqrt"], "predictors": ["identity", "log"]}
    req["units"] = {
        "repair_cost": "currency units",
        "pipe_length_m": "metre",
        "pipe_age_years": "year",
    }
    req["incumbent"] = {
        "response": {"column": "repair_cost"},
        "predictors": [
            {"column": "pipe_length_m"},
            {"column": "pipe_age_years"},
            {"column": "soil", "transform": {"name": "categorical"}},
        ],
    }
    return req


@lru_cache(maxsize=1)
def demo_report():
    """(the /v1/reports response, the JSON body /v1/selections gives for the same request)."""
    client = TestClient(app)
    req = report_request()
    page = client.post("/v1/reports", json=req)
    assert page.status_code == 200, page.text
    body = client.post("/v1/selections", json=req)
    assert body.status_code == 200, body.text
    return page, body.json()
