"""Shared fixtures: every store and API test runs on SQLite and on PostgreSQL.

PostgreSQL: one throwaway database per test run (created here, dropped at the end), with its
tables emptied between tests. Where PostgreSQL cannot be reached the PostgreSQL half is skipped
locally, but fails the run under CI (CI=true), so a green CI always means both databases ran.
SQLite: a migrated template file per run, copied for every test.
"""

from __future__ import annotations

import os
import shutil
import uuid
from collections.abc import Iterator
from pathlib import Path

import pytest
from sqlalchemy import create_engine, text
from sqlalchemy.engine import make_url

from app.config import get_settings
from app.db import Database
from app.store.migrate import upgrade
from app.store.tables import Base

PG_ADMIN_URL = os.environ.get(
    "STACKLEDGER_TEST_PG_URL", "postgresql+psycopg://postgres@127.0.0.1:5432/postgres"
)


@pytest.fixture(scope="session")
def sqlite_template(tmp_path_factory: pytest.TempPathFactory) -> Path:
    path = tmp_path_factory.mktemp("template") / "template.db"
    db = Database(f"sqlite:///{path}")
    upgrade(db.engine)
    db.close()  # the last connection to close folds the WAL back into the file
    return path


@pytest.fixture(scope="session")
def pg_url() -> Iterator[str]:
    name = f"stackledger_test_{uuid.uuid4().hex[:10]}"
    try:
        admin = create_engine(PG_ADMIN_URL, isolation_level="AUTOCOMMIT")
        with admin.connect() as conn:
            conn.execute(text(f'CREATE DATABASE "{name}"'))
    except Exception as exc:
        if os.environ.get("CI"):
            pytest.fail(f"PostgreSQL at {PG_ADMIN_URL} is unreachable under CI: {exc}")
        pytest.skip(f"PostgreSQL unreachable ({type(exc).__name__}); set up or run under CI")
    url = make_url(PG_ADMIN_URL).set(database=name).render_as_string(hide_password=False)
    db = Database(url)
    upgrade(db.engine)
    db.close()
    try:
        yield url
    finally:
        with admin.connect() as conn:
            conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()


@pytest.fixture(params=["sqlite", "postgresql"])
def db(request: pytest.FixtureRequest, tmp_path: Path) -> Iterator[Database]:
    """A migrated, empty store on each database."""
    get_settings.cache_clear()
    if request.param == "sqlite":
        path = tmp_path / "store.db"
        shutil.copy(request.getfixturevalue("sqlite_template"), path)
        database = Database(f"sqlite:///{path}")
    else:
        database = Database(request.getfixturevalue("pg_url"))
        tables = ", ".join(f'"{t.name}"' for t in reversed(Base.metadata.sorted_tables))
        with database.engine.begin() as conn:
            conn.execute(text(f"TRUNCATE {tables} RESTART IDENTITY CASCADE"))
    try:
        yield database
    finally:
        database.close()
