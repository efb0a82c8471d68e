"""The shared HTTP client of the API tests (a module may define its own)."""

from __future__ import annotations

import pytest
from fastapi.testclient import TestClient
from service.app import app


@pytest.fixture(scope="module")
def client():
    """The service app; server errors come back as responses, so a test sees a 500."""
    with TestClient(app, raise_server_exceptions=False) as c:
        yield c
