"""Run the Alembic migrations in ``app/store/migrations/`` (shipped in the wheel)."""

from __future__ import annotations

from pathlib import Path

from alembic import command
from alembic.config import Config
from sqlalchemy import Engine

MIGRATIONS_DIR = Path(__file__).resolve().parent / "migrations"


def alembic_config(url: str | None = None) -> Config:
    cfg = Config()
    cfg.set_main_option("script_location", str(MIGRATIONS_DIR))
    if url:
        cfg.set_main_option("sqlalchemy.url", url.replace("%", "%%"))
    return cfg


def upgrade(engine: Engine, revision: str = "head") -> None:
    """Bring the database behind ``engine`` to ``revision``."""
    cfg = alembic_config()
    with engine.connect() as conn:
        cfg.attributes["connection"] = conn
        command.upgrade(cfg, revision)
        conn.commit()


def new_revision(message: str, url: str) -> None:
    """Autogenerate a migration from the difference between ``url``'s schema and the tables."""
    command.revision(alembic_config(url), message=message, autogenerate=True)
