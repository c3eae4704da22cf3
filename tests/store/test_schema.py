"""The migrations build exactly the ORM's schema, on both databases; the scale-out rule holds."""

from __future__ import annotations

from alembic.autogenerate import compare_metadata
from alembic.migration import MigrationContext
from sqlalchemy import inspect

from app.store.tables import Base

PANEL_OWNED = ("measurements", "measurement_sites", "fits", "panel_states", "holds")


def test_migrations_match_the_tables(db):
    with db.engine.connect() as conn:
        context = MigrationContext.configure(conn, opts={"compare_type": True})
        diff = compare_metadata(context, Base.metadata)
    assert diff == []


def test_every_unique_key_of_panel_owned_tables_contains_the_panel(db):
    inspector = inspect(db.engine)
    for table in PANEL_OWNED:
        pk = inspector.get_pk_constraint(table)["constrained_columns"]
        assert "panel" in pk, table
        for unique in inspector.get_unique_constraints(table):
            assert "panel" in unique["column_names"], (table, unique)
        for index in inspector.get_indexes(table):
            if index.get("unique"):
                assert "panel" in index["column_names"], (table, index)


def test_sqlite_pragmas(db):
    if db.engine.dialect.name != "sqlite":
        return
    with db.engine.connect() as conn:
        assert conn.exec_driver_sql("PRAGMA journal_mode").scalar() == "wal"
        assert conn.exec_driver_sql("PRAGMA foreign_keys").scalar() == 1
        assert conn.exec_driver_sql("PRAGMA busy_timeout").scalar() == 30000
