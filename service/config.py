"""Settings: one pydantic-settings class, read from ``RISKFIT_*`` environment variables.

Build it through :func:`get_settings` (cached), never at import time; tests pass
their own :class:`Settings` instance to ``create_app(settings=...)``.
"""

from __future__ import annotations

from functools import lru_cache

from pydantic import Field, field_validator
from pydantic_settings import BaseSettings, SettingsConfigDict

__all__ = ["Settings", "get_settings"]


class Settings(BaseSettings):
    """Every setting of the service, with its documented default."""

    model_config = SettingsConfigDict(env_prefix="RISKFIT_", extra="ignore")

    database_url: str = Field(
        "sqlite:///./riskfit.db",
        description="SQLAlchemy URL of the store; PostgreSQL for more than one process or host.",
    )
    sqlite_busy_timeout_ms: int = Field(30_000, ge=0, description="SQLite busy timeout (ms).")
    host: str = Field("127.0.0.1", description="Address `riskfit serve` binds to.")
    port: int = Field(8000, ge=1, le=65535, description="Port `riskfit serve` listens on.")
    default_confidence_level: float = Field(
        0.95, gt=0.0, lt=1.0, description="Confidence level when a request gives none."
    )

    @field_validator("database_url")
    @classmethod
    def _url_has_scheme(cls, value: str) -> str:
        if "://" not in value:
            raise ValueError(
                f"RISKFIT_DATABASE_URL={value!r} is not an SQLAlchemy URL; "
                "use e.g. sqlite:///./riskfit.db or postgresql+psycopg://user@host/db"
            )
        return value


@lru_cache(maxsize=1)
def get_settings() -> Settings:
    """The process-wide settings, built on first use from the environment."""
    return Settings()
