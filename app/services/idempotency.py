"""Idempotency keys (after the IETF Idempotency-Key header draft), for posts and imports.

The first request with a key stores its answer; a repeat with the same key and the same body
gets that answer again (200); the same key with a different body is refused (422). Keys are
scoped to the API key that sent them (``owner``; 0 is the local command line). A key is
claimed first thing in the write transaction by an insert that does nothing when the key is
taken, so two requests with one key never both write, whatever they name: on PostgreSQL the
second waits for the first to commit, then reads its answer.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import select, update
from sqlalchemy.orm import Session

from app.db import Database
from app.errors import FieldError, InvalidInput
from app.store.tables import IdempotencyRecord
from app.store.upsert import insert_ignore

CLI_OWNER = 0


def _check(record: IdempotencyRecord, digest: str, key: str) -> dict[str, Any]:
    if record.body_sha256 != digest:
        raise InvalidInput(
            f"Idempotency-Key '{key}' was already used with a different body; use a new key "
            "for new content",
            [FieldError(message="key already used with another body",
                        pointer="header:/Idempotency-Key")])
    return dict(record.response)


def stored(db: Database, *, key: str, owner: int, digest: str) -> dict[str, Any] | None:
    """The stored answer for a repeat (before any work is done), or None."""
    with db.reading() as session:
        record = session.get(IdempotencyRecord, (key, owner))
        if record is None or not record.status_code:
            return None
        return _check(record, digest, key)


def claim(session: Session, *, key: str, owner: int, digest: str) -> dict[str, Any] | None:
    """Claim ``key`` in this transaction: None when claimed, else the winner's answer."""
    if insert_ignore(session, IdempotencyRecord, {
            "key": key, "key_owner": owner, "body_sha256": digest, "status_code": 0,
            "response": {}}):
        return None
    record = session.scalars(
        select(IdempotencyRecord).where(IdempotencyRecord.key == key,
                                        IdempotencyRecord.key_owner == owner)
        .execution_options(populate_existing=True)).one()
    return _check(record, digest, key)


def finish(session: Session, *, key: str, owner: int, response: dict[str, Any]) -> None:
    """Store the answer of the claimed key, in the claiming transaction."""
    session.execute(update(IdempotencyRecord).where(
        IdempotencyRecord.key == key, IdempotencyRecord.key_owner == owner,
    ).values(status_code=201, response=response))
