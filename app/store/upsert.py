"""Insert a row unless its key is taken, on both databases, without an error either way.

``INSERT ... ON CONFLICT DO NOTHING``: under concurrency, PostgreSQL makes a second insert of
the same key wait for the first transaction and then do nothing, so the caller can read the
winner's row instead of failing on a duplicate key (a 500). SQLite serialises writers anyway.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy.dialects import postgresql, sqlite
from sqlalchemy.orm import Session


def insert_ignore(session: Session, model: Any, values: dict[str, Any]) -> bool:
    """Insert ``values`` into ``model``'s table; True when this call inserted the row."""
    dialect = session.get_bind().dialect.name
    insert = postgresql.insert if dialect == "postgresql" else sqlite.insert
    key = model.__table__.primary_key.columns.values()
    # RETURNING says whether a row went in on both drivers (a rowcount can be -1 with it).
    statement = insert(model).values(**values).on_conflict_do_nothing().returning(*key)
    return session.execute(statement).first() is not None
