"""Service settings, read once at start-up from ``BESTSCALE_*`` environment variables."""

from __future__ import annotations

from functools import lru_cache

from pydantic import Field
from pydantic_settings import BaseSettings, SettingsConfigDict


class Settings(BaseSettings):
    model_config = SettingsConfigDict(env_prefix="BESTSCALE_", extra="ignore")

    host: str = Field("127.0.0.1", description="address to listen on")
    port: int = Field(8000, ge=1, le=65535)
    workers: int = Field(1, ge=1, le=64, description="server processes")
    pool_size: int = Field(2, ge=1, le=256, description="concurrent CPU-bound requests per process")
    blas_threads: int = Field(1, ge=1, le=64, description="BLAS threads per worker")
    max_body_bytes: int = Field(64 * 1024 * 1024, ge=1024)
    max_rows: int = Field(1_000_000, ge=10)
    max_columns: int = Field(200, ge=2)
    max_candidates: int = Field(20_000, ge=1)
    max_groups: int = Field(1000, ge=1)
    default_max_candidates: int = Field(5_000, ge=1)
    default_time_limit_s: float = Field(60.0, gt=0)
    max_time_limit_s: float = Field(600.0, gt=0)
    api_token: str | None = Field(None, description="if set, /v1/* requires 'Authorization: Bearer <token>'")
    cors_origins: list[str] = Field(default_factory=list)
    log_level: str = "info"


@lru_cache(maxsize=1)
def get_settings() -> Settings:
    return Settings()
