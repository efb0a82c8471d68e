"""Service settings, read once at start-up from ``BESTSCALE_*`` environment variables.

Every value is typed and range-checked; a bad value stops the service at start-up with
one message per variable (see ``python -m service``), never at the first request.
"""

from __future__ import annotations

import json
import math
import os
import re
from functools import lru_cache
from typing import Annotated, Literal

from pydantic import Field, SecretStr, field_validator, model_validator
from pydantic_settings import BaseSettings, NoDecode, SettingsConfigDict

from .selection.defaults import DEFAULT_MAX_CANDIDATES, DEFAULT_TIME_LIMIT_S

# scheme://host[:port] exactly as a browser sends it in the Origin header (no path, no
# trailing slash: CORS compares whole strings, so 'https://a.example/' would never match)
_ORIGIN = re.compile(r"^https?://[A-Za-z0-9.\-\[\]:]+$")
_TOKEN = re.compile(r"^[\x21-\x7e]+$")  # visible ASCII: it travels in an HTTP header
_KEY_ID = re.compile(r"^[A-Za-z0-9._-]{1,64}$")
MIN_MODEL_KEY_CHARS = 32


#: the cgroup v2 CPU limit of this process's group ("$MAX $PERIOD", or "max $PERIOD")
CGROUP_CPU_MAX = "/sys/fs/cgroup/cpu.max"


def usable_cores() -> int:
    """Cores this process may run on: its CPU affinity, lowered to the cgroup v2 CPU quota
    rounded up (what a container's CPU limit sets) when one is set."""
    try:
        n = len(os.sched_getaffinity(0))
    except (AttributeError, OSError):  # no affinity call on this platform
        n = os.cpu_count() or 1
    try:
        with open(CGROUP_CPU_MAX, encoding="ascii") as f:
            quota, period = f.read().split()[:2]
        if quota != "max" and int(period) > 0:
            n = min(n, math.ceil(int(quota) / int(period)))
    except (OSError, ValueError):
        pass  # no cgroup v2 limit readable: the affinity alone
    return max(1, n)


class Settings(BaseSettings):
    model_config = SettingsConfigDict(env_prefix="BESTSCALE_", extra="ignore", frozen=True)

    host: str = Field("127.0.0.1", min_length=1, description="address to listen on")
    port: int = Field(8000, ge=1, le=65535, description="port to listen on")
    workers: int | None = Field(
        None,
        ge=1,
        le=64,
        description="server processes (unset: one per core this process may use, at most 64)",
    )
    group_processes: int = Field(
        1,
        ge=1,
        le=64,
        description="processes that share the groups of one group_by "
        "request (1: in the request's own process)",
    )
    dask_scheduler: str | None = Field(
        None,
        pattern=r"^(local|(tcp|tls)://\S+)$",
        description="Dask scheduler for `select --group-by` batch jobs without --cluster "
        "(tcp://HOST:8786, or 'local' for a cluster on this machine)",
    )
    shared_dir: str | None = Field(
        None,
        min_length=1,
        description="directory every Dask worker sees at the same path (a shared file system); "
        "batch jobs whose data go the Parquet way write their segments there",
    )
    parquet_above_mb: float = Field(
        256.0,
        ge=0,
        le=2**30,
        description="batch jobs on a Dask cluster whose segment columns exceed this many MiB "
        "hand them to the workers as a Parquet dataset under the shared directory instead of "
        "with each task (0: always)",
    )
    dask_worker_profile: bool = Field(
        False,
        description="keep Dask's statistical profiler on in the workers of a LocalCluster "
        "that `select --cluster local` starts (it samples every worker thread every 10 ms and "
        "cost about 9 % of each segment's CPU)",
    )
    pool_size: int = Field(
        2,
        ge=1,
        le=256,
        description="compute-bound requests running at once per process; "
        "more get 503 with Retry-After",
    )
    blas_threads: int = Field(1, ge=1, le=64, description="BLAS threads per process")
    max_body_bytes: int = Field(
        64 * 1024 * 1024,
        ge=1024,
        le=2**34,
        description="larger request bodies get 413 before they are read",
    )
    body_timeout_s: float = Field(
        60.0,
        gt=0,
        le=3600,
        description="a request body must arrive whole within this many "
        "seconds of the request's start (408 otherwise)",
    )
    header_timeout_s: float = Field(
        10.0,
        gt=0,
        le=600,
        description="a connection must send a complete request head within this many "
        "seconds of opening (or of its previous response), else it is closed",
    )
    max_connections: int = Field(
        200,
        ge=1,
        le=100_000,
        description="open connections per server process; a connection past it is closed at once",
    )
    max_rows: int = Field(1_000_000, ge=10, description="table rows accepted (422 past it)")
    max_columns: int = Field(200, ge=2, description="columns a request may use (422 past it)")
    max_table_columns: int = Field(
        1000,
        ge=2,
        description="columns a table may hold, used or not (422 past it; checked before "
        "any cell is parsed)",
    )
    max_uncompressed_bytes: int = Field(
        256 * 1024 * 1024,
        ge=1024,
        le=2**36,
        description="an uploaded Parquet file may expand to at most this many bytes "
        "(413 past it, read from the file's metadata before decoding)",
    )
    max_response_bytes: int = Field(
        64 * 1024 * 1024,
        ge=64 * 1024,
        le=2**34,
        description="larger JSON responses are not sent; the caller gets a 422 naming "
        "what to reduce",
    )
    max_candidates: int = Field(20_000, ge=1, description="largest limits.max_candidates accepted")
    default_max_candidates: int = Field(
        DEFAULT_MAX_CANDIDATES, ge=1, description="limits.max_candidates when omitted"
    )
    max_groups: int = Field(1000, ge=1, description="group_by values per request (422 past it)")
    default_time_limit_s: float = Field(
        DEFAULT_TIME_LIMIT_S, gt=0, le=86400, description="limits.time_limit_s when omitted"
    )
    max_time_limit_s: float = Field(
        600.0, gt=0, le=86400, description="largest limits.time_limit_s accepted"
    )
    api_token: SecretStr | None = Field(
        None, description="if set, /v1/* requires 'Authorization: Bearer <token>'"
    )
    metrics_public: bool = Field(
        False,
        description="with an API token set, /metrics needs the token too unless this is true "
        "(then restrict it at the network level)",
    )
    docs_public: bool | None = Field(
        None,
        description="whether /docs, /redoc and /openapi.json answer without the token; "
        "default: public only when no API token is set",
    )
    cors_origins: Annotated[list[str], NoDecode] = Field(
        default_factory=list,
        description="browser origins allowed to call the API: a JSON list "
        "or a comma-separated list of scheme://host[:port]; empty allows none",
    )
    model_key: SecretStr | None = Field(
        None,
        description="secret (32 or more visible ASCII characters) that signs model "
        "artifacts with HMAC-SHA-256; unset: artifacts are marked unsigned and anyone "
        "can forge one",
    )
    model_key_id: str = Field(
        "k1",
        description="name of the current model key, written into every signature so keys "
        "can rotate (letters, digits, '.', '_', '-')",
    )
    model_previous_keys: Annotated[dict[str, SecretStr], NoDecode] = Field(
        default_factory=dict,
        description="earlier model keys still accepted by /v1/predictions: a JSON object "
        "{key id: key} or a comma-separated list of id:key",
    )
    log_level: Literal["critical", "error", "warning", "info", "debug"] = Field(
        "info", description="level of the JSON log lines"
    )

    def server_processes(self) -> int:
        """Server processes to start: ``workers`` when set, else one per usable core (at most
        64)."""
        return self.workers if self.workers is not None else min(usable_cores(), 64)

    @field_validator("log_level", mode="before")
    @classmethod
    def _lower(cls, v):
        return v.strip().lower() if isinstance(v, str) else v

    @field_validator("api_token", mode="before")
    @classmethod
    def _token(cls, v):
        if isinstance(v, str):
            v = v.strip()
            if not v:
                return None  # an empty variable means "no token", as if it were unset
            if len(v) < 16 or not _TOKEN.match(v):
                raise ValueError(
                    "the API token must be at least 16 visible ASCII characters without spaces"
                )
        return v

    @field_validator("model_key", mode="before")
    @classmethod
    def _model_key(cls, v):
        if isinstance(v, str):
            v = v.strip()
            if not v:
                return None
            _check_model_key(v)
        return v

    @field_validator("model_key_id")
    @classmethod
    def _model_key_id(cls, v):
        if not _KEY_ID.match(v):
            raise ValueError(f"model key id {v!r} must be 1 to 64 letters, digits, '.', '_' or '-'")
        return v

    @field_validator("model_previous_keys", mode="before")
    @classmethod
    def _previous_keys(cls, v):
        if isinstance(v, str):
            text = v.strip()
            if text.startswith("{"):
                try:
                    v = json.loads(text)
                except ValueError:
                    raise ValueError("previous model keys are not a JSON object") from None
            else:
                v = {}
                for part in (p.strip() for p in text.split(",")):
                    if not part:
                        continue
                    kid, sep, key = part.partition(":")
                    if not sep:
                        raise ValueError(
                            "previous model keys must be written id:key (comma-separated)"
                        )
                    v[kid.strip()] = key.strip()
        if isinstance(v, dict):
            for kid, key in v.items():
                if not isinstance(kid, str) or not _KEY_ID.match(kid):
                    raise ValueError(
                        f"model key id {kid!r} must be 1 to 64 letters, digits, '.', '_' or '-'"
                    )
                if isinstance(key, str):
                    _check_model_key(key)
        return v

    @field_validator("cors_origins", mode="before")
    @classmethod
    def _origins(cls, v):
        if isinstance(v, str):
            text = v.strip()
            if text.startswith("["):
                try:
                    v = json.loads(text)
                except ValueError:
                    raise ValueError(f"CORS origins {text!r} are not a JSON list") from None
            else:
                v = [part.strip() for part in text.split(",") if part.strip()]
        if isinstance(v, list):
            for origin in v:
                if not isinstance(origin, str) or not (origin == "*" or _ORIGIN.match(origin)):
                    raise ValueError(
                        f"CORS origin {origin!r} is not scheme://host[:port] "
                        "(no path, no trailing slash) or '*'"
                    )
        return v

    @model_validator(mode="after")
    def _defaults_within_limits(self):
        if self.default_max_candidates > self.max_candidates:
            raise ValueError(
                f"default_max_candidates ({self.default_max_candidates}) exceeds "
                f"max_candidates ({self.max_candidates})"
            )
        if self.default_time_limit_s > self.max_time_limit_s:
            raise ValueError(
                f"default_time_limit_s ({self.default_time_limit_s:g}) exceeds "
                f"max_time_limit_s ({self.max_time_limit_s:g})"
            )
        if self.model_key is None and self.model_previous_keys:
            raise ValueError(
                "previous model keys are set but BESTSCALE_MODEL_KEY is not; set the "
                "current key too"
            )
        if self.model_key_id in self.model_previous_keys:
            raise ValueError(
                f"model key id {self.model_key_id!r} is both the current and a previous key"
            )
        return self

    def model_keys(self) -> tuple[str, dict[str, bytes]] | None:
        """(current key id, {key id: key bytes} including the current one), or None
        when artifacts are not signed."""
        if self.model_key is None:
            return None
        keys = {k: v.get_secret_value().encode() for k, v in self.model_previous_keys.items()}
        keys[self.model_key_id] = self.model_key.get_secret_value().encode()
        return self.model_key_id, keys

    def token(self) -> str | None:
        """The API token in clear, or None when the API is open."""
        return self.api_token.get_secret_value() if self.api_token is not None else None


def _check_model_key(v: str) -> None:
    if len(v) < MIN_MODEL_KEY_CHARS or not _TOKEN.match(v):
        raise ValueError(
            f"a model key must be at least {MIN_MODEL_KEY_CHARS} visible ASCII characters "
            "without spaces (for example 64 hex digits from a random source)"
        )


@lru_cache(maxsize=1)
def get_settings() -> Settings:
    """The process's settings, read from the environment on first use and then kept."""
    return Settings()


def describe_error(exc: Exception) -> str:
    """One line per invalid variable, naming it as it is set in the environment."""
    errors = getattr(exc, "errors", None)
    if not callable(errors):
        return str(exc)
    lines = []
    for e in errors():
        loc = e.get("loc") or ()
        var = f"BESTSCALE_{str(loc[0]).upper()}" if loc else "settings"
        msg = e.get("msg", "invalid value")
        msg = msg[len("Value error, ") :] if msg.startswith("Value error, ") else msg
        lines.append(f"{var}: {msg}")
    return "\n".join(lines)
