"""Settings: read once from BESTSCALE_* variables, typed and range-checked, with one clear
message per bad variable."""

from __future__ import annotations

import os
import subprocess
import sys
from pathlib import Path

import pytest
from pydantic import ValidationError
from service import settings as settings_mod
from service.settings import Settings, describe_error, get_settings

ROOT = Path(__file__).resolve().parents[1]
VARS = [
    "HOST",
    "PORT",
    "WORKERS",
    "POOL_SIZE",
    "BLAS_THREADS",
    "MAX_BODY_BYTES",
    "MAX_ROWS",
    "MAX_COLUMNS",
    "MAX_CANDIDATES",
    "DEFAULT_MAX_CANDIDATES",
    "MAX_GROUPS",
    "DEFAULT_TIME_LIMIT_S",
    "MAX_TIME_LIMIT_S",
    "API_TOKEN",
    "CORS_ORIGINS",
    "LOG_LEVEL",
]


@pytest.fixture
def env(monkeypatch):
    for v in VARS:
        monkeypatch.delenv(f"BESTSCALE_{v}", raising=False)

    def set_(**values):
        for k, v in values.items():
            monkeypatch.setenv(f"BESTSCALE_{k.upper()}", v)
        return Settings()

    return set_


def test_defaults_are_the_documented_ones(env):
    s = env()
    # source: the settings table of README.md
    assert (s.host, s.port, s.workers, s.pool_size, s.blas_threads) == (
        "127.0.0.1",
        8000,
        None,
        2,
        1,
    )
    assert s.server_processes() == min(settings_mod.usable_cores(), 64)  # one per core
    assert s.max_body_bytes == 64 * 1024 * 1024
    assert (
        s.max_rows,
        s.max_columns,
        s.max_candidates,
        s.default_max_candidates,
        s.max_groups,
    ) == (1_000_000, 200, 20_000, 5_000, 1000)
    assert (s.default_time_limit_s, s.max_time_limit_s) == (60.0, 600.0)
    assert s.token() is None and s.cors_origins == [] and s.log_level == "info"


def test_every_issue_setting_is_read_from_the_environment(env):
    s = env(
        host="0.0.0.0",
        port="9001",
        workers="3",
        pool_size="5",
        blas_threads="2",
        max_body_bytes="4096",
        max_rows="500",
        max_columns="12",
        max_candidates="100",
        default_max_candidates="50",
        max_groups="7",
        default_time_limit_s="2.5",
        max_time_limit_s="10",
        api_token="t" * 20,
        cors_origins='["https://ops.example"]',
        log_level="WARNING",
    )
    assert (s.host, s.port, s.workers, s.pool_size, s.blas_threads) == ("0.0.0.0", 9001, 3, 5, 2)
    assert (s.max_body_bytes, s.max_rows, s.max_columns) == (4096, 500, 12)
    assert (s.max_candidates, s.default_max_candidates, s.max_groups) == (100, 50, 7)
    assert (s.default_time_limit_s, s.max_time_limit_s) == (2.5, 10.0)
    assert s.token() == "t" * 20 and s.cors_origins == ["https://ops.example"]
    assert s.log_level == "warning"


def test_cors_origins_as_comma_separated_list(env):
    # source: RFC 6454 section 6.1 (an origin serialises as scheme://host[:port], no path)
    s = env(cors_origins="https://a.example, http://localhost:3000")
    assert s.cors_origins == ["https://a.example", "http://localhost:3000"]


@pytest.mark.parametrize(
    "origins",
    [
        '["https://a.example/"]',
        "https://a.example/app",
        "ftp://a.example",
        '["https://a.example"',
        "[1]",
    ],
)
def test_bad_cors_origin_is_refused_by_name(env, origins):
    with pytest.raises(ValidationError) as info:
        env(cors_origins=origins)
    assert "BESTSCALE_CORS_ORIGINS" in describe_error(info.value)


def test_empty_token_means_no_token(env):
    assert env(api_token="").token() is None


@pytest.mark.parametrize("token", ["short", "has a space in it!!", "x" * 15])
def test_weak_or_unsendable_token_is_refused(env, token):
    with pytest.raises(ValidationError) as info:
        env(api_token=token)
    assert "BESTSCALE_API_TOKEN" in describe_error(info.value)


def test_token_is_kept_out_of_repr(env):
    s = env(api_token="s3cret-token-value-1234")
    assert "s3cret" not in repr(s) and "s3cret" not in str(s.model_dump())


@pytest.mark.parametrize(
    "var,value",
    [
        ("port", "0"),
        ("port", "70000"),
        ("workers", "0"),
        ("pool_size", "0"),
        ("max_body_bytes", "10"),
        ("max_rows", "-1"),
        ("default_time_limit_s", "0"),
        ("port", "eighty"),
        ("log_level", "loud"),
        ("max_time_limit_s", "nan"),
    ],
)
def test_out_of_range_value_names_the_variable(env, var, value):
    with pytest.raises(ValidationError) as info:
        env(**{var: value})
    assert f"BESTSCALE_{var.upper()}" in describe_error(info.value)


@pytest.mark.parametrize(
    "over",
    [
        {"default_max_candidates": "30000"},  # above max_candidates 20000
        {"default_time_limit_s": "700"},  # above max_time_limit_s 600
    ],
)
def test_defaults_must_lie_within_the_limits(env, over):
    with pytest.raises(ValidationError):
        env(**over)


def test_settings_are_read_once_and_frozen(monkeypatch):
    get_settings.cache_clear()
    try:
        first = get_settings()
        monkeypatch.setenv("BESTSCALE_POOL_SIZE", "9")
        assert get_settings() is first  # later changes of the environment are not seen
        with pytest.raises(ValidationError):
            first.pool_size = 3
    finally:
        get_settings.cache_clear()


def test_service_refuses_to_start_with_bad_settings():
    env = {**os.environ, "BESTSCALE_PORT": "99999"}
    r = subprocess.run(
        [sys.executable, "-m", "service", "--help"],
        env=env,
        capture_output=True,
        text=True,
        timeout=60,
        cwd=ROOT,
    )
    assert r.returncode == 2
    assert "BESTSCALE_PORT" in r.stderr and "Traceback" not in r.stderr


@pytest.mark.parametrize(
    "cpu_max, affinity, want",
    [
        (None, 8, 8),  # no cgroup file: the affinity
        ("max 100000\n", 8, 8),  # no quota
        ("150000 100000\n", 8, 2),  # 1.5 CPUs: two processes
        ("200000 100000\n", 8, 2),
        ("50000 100000\n", 8, 1),  # half a CPU: still one
        ("800000 100000\n", 2, 2),  # a quota above the affinity: the affinity
        ("garbled\n", 4, 4),
    ],
)
def test_usable_cores_follow_affinity_and_the_cgroup_quota(
    monkeypatch, tmp_path, cpu_max, affinity, want
):
    path = tmp_path / "cpu.max"
    if cpu_max is not None:
        path.write_text(cpu_max)
    monkeypatch.setattr(settings_mod, "CGROUP_CPU_MAX", str(path))
    monkeypatch.setattr(settings_mod.os, "sched_getaffinity", lambda pid: set(range(affinity)))
    # source: Linux cgroup v2 documentation, cpu.max: "$MAX $PERIOD" ("max" for no limit),
    # the group may use MAX microseconds of CPU every PERIOD microseconds
    assert settings_mod.usable_cores() == want


def test_workers_setting_overrides_the_core_count(env, monkeypatch):
    monkeypatch.setattr(settings_mod, "usable_cores", lambda: 100)
    assert env().server_processes() == 64  # capped at the largest accepted value
    assert env(workers="3").server_processes() == 3
