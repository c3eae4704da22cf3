"""Alembic environment. The URL comes from the caller's config (``app.store.migrate``) or from
STACKLEDGER_DATABASE_URL. SQLite runs in batch mode so ALTERs work there too."""

from __future__ import annotations

from alembic import context
from sqlalchemy import Connection

from app.db import make_engine
from app.store.tables import Base

config = context.config
target_metadata = Base.metadata


def _run(connection: Connection) -> None:
    context.configure(
        connection=connection,
        target_metadata=target_metadata,
        render_as_batch=connection.dialect.name == "sqlite",
        compare_type=True,
    )
    with context.begin_transaction():
        context.run_migrations()


def run_online() -> None:
    connection = config.attributes.get("connection")
    if connection is not None:
        _run(connection)
        return
    engine = make_engine(config.get_main_option("sqlalchemy.url") or None)
    with engine.connect() as conn:
        _run(conn)
    engine.dispose()


if context.is_offline_mode():
    raise SystemExit("stackledger migrations run online only")
run_online()
