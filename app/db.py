"""Engine and session factory.

SQLite (the embedded default) runs in WAL mode with foreign keys on and a busy timeout. A write
transaction starts with BEGIN IMMEDIATE, so that concurrent writers queue on the write lock
instead of failing half way with "database is locked"; a read transaction (``db.reading()``)
starts with a plain BEGIN and, under WAL, never waits for a writer. PostgreSQL needs nothing
special.
"""

from __future__ import annotations

import threading
from collections.abc import Iterator
from contextlib import contextmanager, nullcontext
from typing import Any

from sqlalchemy import Engine, create_engine, event
from sqlalchemy.orm import Session, sessionmaker

from app.config import get_settings
from app.store.cache import RevisionCache

_READING = "stackledger_reading"


def _sqlite_setup(engine: Engine, busy_timeout_ms: int) -> None:
    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_conn: Any, _record: Any) -> None:
        # Let SQLAlchemy, not the sqlite3 module, decide when transactions begin.
        dbapi_conn.isolation_level = None
        cur = dbapi_conn.cursor()
        cur.execute("PRAGMA journal_mode=WAL")
        cur.execute("PRAGMA foreign_keys=ON")
        cur.execute(f"PRAGMA busy_timeout={int(busy_timeout_ms)}")
        cur.execute("PRAGMA synchronous=NORMAL")
        cur.close()

    @event.listens_for(engine, "begin")
    def _on_begin(conn: Any) -> None:
        reading = conn.get_execution_options().get(_READING, False)
        conn.exec_driver_sql("BEGIN" if reading else "BEGIN IMMEDIATE")


def make_engine(url: str | None = None) -> Engine:
    settings = get_settings()
    url = url or settings.database_url
    if url.startswith("sqlite"):
        engine = create_engine(url, connect_args={"check_same_thread": False, "timeout": 30})
        _sqlite_setup(engine, settings.sqlite_busy_timeout_ms)
        return engine
    if url.startswith("postgresql://"):
        url = "postgresql+psycopg://" + url.removeprefix("postgresql://")
    return create_engine(url, pool_pre_ping=True)


class Database:
    """One engine and its session factory; the app and the CLI each hold one."""

    def __init__(self, url: str | None = None) -> None:
        self.engine = make_engine(url)
        self.sessions = sessionmaker(self.engine, expire_on_commit=False)
        self._read_sessions = sessionmaker(
            self.engine.execution_options(**{_READING: True}), expire_on_commit=False
        )
        #: Learned product histories, by product id, valid for one products.history_revision.
        self.history: RevisionCache[Any] = RevisionCache()
        # SQLite has one writer at a time. Writers of this process queue here, in order, before
        # BEGIN IMMEDIATE, instead of in SQLite's busy handler, whose retries back off and give
        # a long tail of waits under concurrent posts. (Other processes still meet the busy
        # timeout.)
        self._sqlite_writers = (threading.RLock() if self.engine.dialect.name == "sqlite"
                                else None)

    @contextmanager
    def transaction(self) -> Iterator[Session]:
        """A session whose work commits on success and rolls back on any error."""
        with self._sqlite_writers or nullcontext(), self.sessions() as session, session.begin():
            yield session

    @contextmanager
    def reading(self) -> Iterator[Session]:
        """A read-only unit of work: on SQLite it does not queue behind a writer."""
        with self._read_sessions() as session, session.begin():
            yield session

    def close(self) -> None:
        """Close every pooled connection (the last one to close folds SQLite's WAL back)."""
        self.engine.dispose()
