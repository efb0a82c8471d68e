"""Starting the service on an address other machines can reach, without a token, warns in one
line; loopback or a token set stays quiet."""

from __future__ import annotations

import pytest
from service import __main__ as entry
from service.settings import get_settings


@pytest.mark.parametrize(
    ("host", "loopback"),
    [
        ("127.0.0.1", True),
        ("127.0.0.53", True),
        ("::1", True),
        ("[::1]", True),
        ("localhost", True),
        ("0.0.0.0", False),
        ("::", False),
        ("10.1.2.3", False),
        ("api.internal.example", False),
    ],
)
def test_loopback_addresses(host, loopback):
    # source: RFC 1122 sec. 3.2.1.3 (127.0.0.0/8) and RFC 4291 sec. 2.5.3 (::1) via ipaddress
    assert entry.is_loopback(host) is loopback


def _start(monkeypatch, capsys, env: dict[str, str], argv: list[str]) -> str:
    import uvicorn

    for k in ("BESTSCALE_HOST", "BESTSCALE_API_TOKEN"):
        monkeypatch.delenv(k, raising=False)
    for k, v in env.items():
        monkeypatch.setenv(k, v)
    monkeypatch.setattr(uvicorn, "run", lambda *a, **kw: None)
    get_settings.cache_clear()
    try:
        assert entry.main(argv) == 0
    finally:
        get_settings.cache_clear()
    return capsys.readouterr().err


def test_open_bind_without_token_warns_once(monkeypatch, capsys):
    err = _start(monkeypatch, capsys, {"BESTSCALE_HOST": "0.0.0.0"}, [])
    lines = [ln for ln in err.splitlines() if "WARNING" in ln]
    assert len(lines) == 1
    assert "0.0.0.0" in lines[0] and "BESTSCALE_API_TOKEN" in lines[0]


def test_flag_host_counts_too(monkeypatch, capsys):
    assert "WARNING" in _start(monkeypatch, capsys, {}, ["--host", "0.0.0.0"])


@pytest.mark.parametrize(
    ("env", "argv"),
    [
        ({}, []),  # the default 127.0.0.1
        ({"BESTSCALE_HOST": "0.0.0.0", "BESTSCALE_API_TOKEN": "x" * 24}, []),
        ({}, ["--host", "::1"]),
    ],
)
def test_no_warning_when_private_or_protected(monkeypatch, capsys, env, argv):
    assert "WARNING" not in _start(monkeypatch, capsys, env, argv)
