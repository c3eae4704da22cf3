"""Fast bulk inserts for the hot tables (sites above all), inside the caller's transaction.

The ORM's unit of work costs tens of microseconds a row; a metrology import writes a million
site rows. So rows go in as plain tuples in table column order: PostgreSQL through COPY
(psycopg), SQLite through the driver's executemany.
"""

from __future__ import annotations

import json
from collections.abc import Callable, Iterable, Sequence
from datetime import UTC
from typing import Any

from sqlalchemy import Table, bindparam
from sqlalchemy.orm import Session

# How SQLAlchemy's types store values in SQLite, for rows that bypass it: Uuid as 32 hex
# characters, timestamps (UtcDateTime) as naive UTC text, JSON as text.
_SQLITE_VALUE: dict[str, Callable[[Any], Any]] = {
    "Uuid": lambda v: v.hex,
    "UtcDateTime": lambda v: v.astimezone(UTC).strftime("%Y-%m-%d %H:%M:%S.%f"),
    "JSON": json.dumps,
}


def insert(
    session: Session, table: Table, rows: Iterable[Sequence[Any]], *, stored_form: bool = False
) -> None:
    """Insert ``rows`` (tuples in the table's column order) in the session's transaction.

    ``stored_form`` says the values are already as both databases store them (numbers, text,
    UUIDs as 32 hex digits), so no value is converted on the way.
    """
    columns = [c.name for c in table.columns]
    connection = session.connection()
    dbapi = connection.connection.dbapi_connection
    assert dbapi is not None
    if connection.dialect.name == "postgresql":
        names = ", ".join(columns)
        with dbapi.cursor() as cur, cur.copy(f"COPY {table.name} ({names}) FROM STDIN") as copy:
            for row in rows:
                copy.write_row(row)
        return
    convert = {i: _SQLITE_VALUE[type(c.type).__name__] for i, c in enumerate(table.columns)
               if type(c.type).__name__ in _SQLITE_VALUE}
    if convert and not stored_form:
        rows = (
            tuple(convert[i](v) if i in convert and v is not None else v
                  for i, v in enumerate(row))
            for row in rows
        )
    placeholders = ", ".join("?" for _ in columns)
    cur = dbapi.cursor()
    try:
        cur.executemany(f"INSERT INTO {table.name} ({', '.join(columns)}) VALUES ({placeholders})",
                        rows)
    finally:
        cur.close()


def supersede(session: Session, updates: Sequence[tuple[Any, str, Any]]) -> None:
    """Mark measurements superseded: rows of (new id, panel, old id)."""
    from app.store.tables import Measurement

    table = Measurement.__table__
    stmt = (
        table.update()
        .where(table.c.panel == bindparam("p"), table.c.id == bindparam("old"))
        .values(superseded_by=bindparam("new"))
    )
    session.execute(stmt, [{"new": n, "p": p, "old": o} for n, p, o in updates])
