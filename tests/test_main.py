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


def test_the_settings_are_read_before_numpy_loads_so_the_blas_threads_can_be_pinned():
    """``python -m service`` reads the settings, then sets the BLAS thread variables, which
    numpy reads once, when it is first imported: reading the settings must not load it."""
    import json
    import os
    import subprocess
    import sys

    code = (
        "import json, os, sys\n"
        "from service.__main__ import _pin_blas, _settings_or_exit\n"
        "s = _settings_or_exit()\n"
        "assert 'numpy' not in sys.modules, 'the settings loaded numpy'\n"
        "_pin_blas(s.blas_threads)\n"
        "import threadpoolctl\n"
        "import numpy\n"
        "numpy.ones(2) @ numpy.ones(2)\n"
        "blas = [i for i in threadpoolctl.threadpool_info() if i['user_api'] == 'blas']\n"
        "print(json.dumps([os.environ['OPENBLAS_NUM_THREADS'], [i['num_threads'] for i in blas]]))\n"
    )
    env = {k: v for k, v in os.environ.items() if not k.endswith("NUM_THREADS")}
    env["BESTSCALE_BLAS_THREADS"] = "1"
    r = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, env=env)
    assert r.returncode == 0, r.stderr
    pinned, loaded = json.loads(r.stdout)
    # source: OpenBLAS reads OPENBLAS_NUM_THREADS at load time; threadpoolctl reports the
    # threads of the BLAS numpy loaded
    assert pinned == "1" and set(loaded) == {1}
