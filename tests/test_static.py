"""Static checks run with the tests, so the README's test command covers them: ruff's lint
rules and formatting over service/ and tests/, and mypy (strict on service/core) over the
package; the configuration of each lives in pyproject.toml."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def _run(*args: str) -> subprocess.CompletedProcess[str]:
    # the service's settings and a metrics directory another test may have left behind
    env = {
        k: v
        for k, v in os.environ.items()
        if not k.startswith("BESTSCALE_") and k != "PROMETHEUS_MULTIPROC_DIR"
    }
    return subprocess.run(
        [sys.executable, "-m", *args], cwd=ROOT, capture_output=True, text=True, env=env
    )


@pytest.mark.parametrize(
    "args",
    [
        ("ruff", "check", "service", "tests", "scripts"),
        ("ruff", "format", "--check", "service", "tests", "scripts"),
    ],
    ids=["ruff-check", "ruff-format"],
)
def test_ruff(args):
    done = _run(*args)
    assert done.returncode == 0, done.stdout + done.stderr


def test_mypy():
    # files and flags from pyproject.toml: every module, the strict flags on service.core
    done = _run("mypy")
    assert done.returncode == 0, done.stdout + done.stderr


def test_api_reference_is_up_to_date():
    done = _run("scripts.api_reference", "--check")
    assert done.returncode == 0, done.stdout + done.stderr
