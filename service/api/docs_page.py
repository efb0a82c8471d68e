"""The interactive API page at ``/docs``, served entirely from this installation.

The page's script and style sheet come from the pinned ``swagger-ui-bundle-v2`` package and
are served under ``/docs/assets``; the icon is our own inline SVG.  Nothing is fetched from
outside, so the page works on a machine without internet and behind any firewall.  The
framework's second documentation page (``/redoc``) is switched off in ``app.py``.
"""

from __future__ import annotations

from urllib.parse import quote

from fastapi import FastAPI
from fastapi.openapi.docs import get_swagger_ui_html
from fastapi.responses import HTMLResponse
from fastapi.staticfiles import StaticFiles
from swagger_ui_bundle import swagger_ui_path

ASSETS = "/docs/assets"
# our own mark: a rising curve on a square, drawn inline so no file or network is needed
_ICON_SVG = (
    '<svg xmlns="http://www.w3.org/2000/svg" viewBox="0 0 16 16">'
    '<rect width="16" height="16" rx="3" fill="#1f4e5f"/>'
    '<path d="M3 13 C6 12 8 9 13 3" stroke="#f2c14e" stroke-width="2" fill="none"/></svg>'
)
ICON = "data:image/svg+xml," + quote(_ICON_SVG)


def install(app: FastAPI) -> None:
    """Add ``GET /docs`` and its static assets to ``app``."""
    app.mount(ASSETS, StaticFiles(directory=swagger_ui_path), name="docs-assets")

    @app.get("/docs", include_in_schema=False)
    def docs() -> HTMLResponse:
        return get_swagger_ui_html(
            openapi_url=app.openapi_url or "/openapi.json",
            title=f"{app.title} API",
            swagger_js_url=f"{ASSETS}/swagger-ui-bundle.js",
            swagger_css_url=f"{ASSETS}/swagger-ui.css",
            swagger_favicon_url=ICON,
            # no badge that would send the document to an outside validator
            swagger_ui_parameters={"validatorUrl": None, "defaultModelsExpandDepth": 0},
        )
