"""GET /docs (service/api/docs_page.py): the API page served from this installation only.

Reference: the page's script and style sheet are the files of the pinned swagger-ui-bundle
package (compared byte for byte); no URL of another host appears in the page (an HTML parse
with Python's html.parser collects every src and href).
"""

from __future__ import annotations

from html.parser import HTMLParser
from pathlib import Path
from urllib.parse import unquote

from fastapi.testclient import TestClient
from service.api.docs_page import ASSETS, ICON
from service.app import app
from swagger_ui_bundle import swagger_ui_path


class _Links(HTMLParser):
    def __init__(self):
        super().__init__()
        self.links: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.links += [v for k, v in attrs if k in ("src", "href") and v]


def test_the_page_and_its_assets_come_from_this_installation():
    with TestClient(app) as c:
        page = c.get("/docs")
        assert page.status_code == 200 and page.headers["content-type"].startswith("text/html")
        parser = _Links()
        parser.feed(page.text)
        assert parser.links and all(link.startswith((ASSETS, "data:")) for link in parser.links), (
            parser.links
        )
        assert "validatorUrl" in page.text and "https://" not in page.text.split("<body>")[1]
        for name in ("swagger-ui-bundle.js", "swagger-ui.css"):
            served = c.get(f"{ASSETS}/{name}")
            # source: the file the pinned package ships
            assert served.content == (Path(swagger_ui_path) / name).read_bytes()


def test_the_icon_is_an_inline_svg():
    assert ICON.startswith("data:image/svg+xml,")
    assert unquote(ICON.split(",", 1)[1]).startswith("<svg")
