"""A headless system Chromium driven by Playwright (never a downloaded browser).

The README's test command installs Debian's ``chromium`` when it is missing
(scripts/ensure-chromium), so a missing browser or a missing ``playwright`` package FAILS
these tests.  On a developer machine without them, set
``BESTSCALE_SKIP_BROWSER=1`` to skip instead; ``BESTSCALE_CHROMIUM`` names another
Chromium executable.
"""

import os
from pathlib import Path

import pytest

CHROMIUM = os.environ.get("BESTSCALE_CHROMIUM", "/usr/bin/chromium")
ARGS = [
    "--headless=new",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
]


def _unavailable(reason: str):
    if os.environ.get("BESTSCALE_SKIP_BROWSER") == "1":
        pytest.skip(f"{reason} (BESTSCALE_SKIP_BROWSER=1)")
    pytest.fail(
        f"{reason}; run 'sh scripts/ensure-chromium' (or 'sudo apt-get install chromium'), "
        "or set BESTSCALE_SKIP_BROWSER=1 to skip the browser tests explicitly",
        pytrace=False,
    )


@pytest.fixture(scope="session")
def browser():
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        _unavailable("the playwright package is not installed")
    if not Path(CHROMIUM).exists():
        _unavailable(f"no Chromium at {CHROMIUM}")
    with sync_playwright() as pw:
        b = pw.chromium.launch(executable_path=CHROMIUM, args=ARGS)
        try:
            yield b
        finally:
            b.close()
