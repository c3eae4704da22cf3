"""The audit log: who did what to which subject, when, with the figures at that moment."""

from __future__ import annotations

from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from app.db import Database
from app.store.tables import AuditEntry


def record(
    session: Session, *, actor: str, action: str, subject: str, details: dict[str, Any]
) -> None:
    """Add an entry inside the caller's transaction, so it lands or fails with the change."""
    session.add(AuditEntry(actor=actor, action=action, subject=subject, details=details))


def list_for(*, db: Database, subject: str) -> list[dict[str, Any]]:
    with db.reading() as session:
        rows = session.scalars(
            select(AuditEntry).where(AuditEntry.subject == subject).order_by(AuditEntry.id)
        ).all()
        return [
            {"at": r.at.isoformat(), "actor": r.actor, "action": r.action, "details": r.details}
            for r in rows
        ]
