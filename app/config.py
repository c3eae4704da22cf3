"""Application settings, read once from the environment (prefix ``STACKLEDGER_``)."""

from __future__ import annotations

from functools import lru_cache
from pathlib import Path

from pydantic import Field
from pydantic_settings import BaseSettings, SettingsConfigDict


class Settings(BaseSettings):
    """Everything the service reads from its environment."""

    model_config = SettingsConfigDict(env_prefix="STACKLEDGER_", extra="ignore")

    database_url: str = Field(
        default_factory=lambda: f"sqlite:///{Path.cwd() / 'stackledger.db'}",
        description="SQLAlchemy URL; default a SQLite file in the working directory.",
    )
    max_body_bytes: int = Field(
        default=8 * 1024 * 1024, description="Largest JSON request body accepted."
    )
    max_import_bytes: int = Field(
        default=256 * 1024 * 1024, description="Largest CSV upload accepted by /imports."
    )
    max_sites_per_measurement: int = 2000
    max_abs_displacement_um: float = Field(
        default=1000.0, description="A site displacement beyond 1 mm is a tool error, not overlay."
    )
    import_chunk_rows: int = 200_000
    forecast_samples: int = 2000
    history_window_panels: int = 200
    history_refresh_s: float = Field(
        default=300.0, description="A write refreshes its product's history cut-off when the "
        "cut-off is older than this (it is refreshed at once when a panel completes its stack "
        "or a measurement is replaced).")
    sqlite_busy_timeout_ms: int = 30_000
    session_secret: str = Field(
        default="", description="Signs page sessions; when empty, read from (or generated "
        "into) session_secret_file.",
    )
    session_secret_file: Path = Field(
        default_factory=lambda: Path.cwd() / "stackledger-session.key",
        description="Where a generated page-session secret is kept (mode 0600).",
    )


@lru_cache
def get_settings() -> Settings:
    """The process-wide settings (tests clear the cache to change them)."""
    return Settings()
