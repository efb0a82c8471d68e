"""Shared fixtures of the API tests: the HTTP client and settings from the environment (a
module may define its own)."""

from __future__ import annotations

import pytest
from fastapi.testclient import TestClient
from service.app import app
from service.settings import get_settings


@pytest.fixture(scope="module")
def client():
    """The service app; server errors come back as responses, so a test sees a 500."""
    with TestClient(app, raise_server_exceptions=False) as c:
        yield c


@pytest.fixture
def env(monkeypatch):
    """Set BESTSCALE_* settings for one test (read through the cached settings)."""

    def setenv(**values):
        for k, v in values.items():
            monkeypatch.setenv(f"BESTSCALE_{k.upper()}", str(v))
        get_settings.cache_clear()

    yield setenv
    monkeypatch.undo()
    get_settings.cache_clear()
