"""Reading the audit log and the refused uploads back: filtered, newest first, in cursor pages
keyed on the row id (which only grows)."""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import func, select

from app.db import Database
from app.errors import FieldError, InvalidInput
from app.schemas.records import (
    AuditEntryRead,
    AuditPage,
    RejectedUploadPage,
    RejectedUploadRead,
)
from app.services import cursor as cursors
from app.services.inputs import refuse_nul
from app.services.keys import Principal
from app.store.tables import AuditEntry, RejectedUpload

BODY_START_CHARS = 2000


def _after_id(cursor: str | None) -> int | None:
    if not cursor:
        return None
    (last,) = cursors.decode(cursor, cursors.integer)
    return int(last)


def list_audit(
    *, db: Database, panel: str | None = None, hold: str | None = None,
    actor: str | None = None, since: datetime | None = None, limit: int = 50,
    cursor: str | None = None,
) -> AuditPage:
    """Audit entries, newest first; ``hold`` matches the hold id the entry names."""
    refuse_nul(panel=panel, hold=hold, actor=actor)
    if since is not None and since.tzinfo is None:
        raise InvalidInput("since needs a time zone, e.g. 2026-11-02T06:00:00Z",
                           [FieldError("no time zone", pointer="query:/since")])
    query = select(AuditEntry)
    if panel:
        query = query.where(AuditEntry.subject == panel)
    if hold:
        query = query.where(AuditEntry.details["hold"].as_string() == hold)
    if actor:
        query = query.where(AuditEntry.actor == actor)
    if since is not None:
        query = query.where(AuditEntry.at >= since)
    last = _after_id(cursor)
    if last is not None:
        query = query.where(AuditEntry.id < last)
    with db.reading() as session:
        rows = session.scalars(query.order_by(AuditEntry.id.desc()).limit(limit + 1)).all()
        items = [AuditEntryRead(id=r.id, at=r.at, actor=r.actor, action=r.action,
                                subject=r.subject, details=r.details) for r in rows[:limit]]
    more = len(rows) > limit
    return AuditPage(items=items, next_cursor=cursors.encode([items[-1].id]) if more else None)


def list_rejections(
    *, db: Database, principal: Principal, limit: int = 50, cursor: str | None = None,
) -> RejectedUploadPage:
    """Refused uploads, newest first: the caller's own key's, or all of them for admin."""
    query = select(RejectedUpload, func.length(RejectedUpload.body))
    if principal.role != "admin":
        query = query.where(RejectedUpload.key_label == principal.label)
    last = _after_id(cursor)
    if last is not None:
        query = query.where(RejectedUpload.id < last)
    with db.reading() as session:
        rows = session.execute(query.order_by(RejectedUpload.id.desc()).limit(limit + 1)).all()
        items = [
            RejectedUploadRead(
                id=r.id, received_at=r.received_at, endpoint=r.endpoint, key_label=r.key_label,
                status=r.status, reason=r.reason, errors=r.errors, content_type=r.content_type,
                body_bytes=int(size or 0),
                body_start=bytes(r.body[:BODY_START_CHARS * 4]).decode("utf-8", "replace")
                [:BODY_START_CHARS],
            )
            for r, size in rows[:limit]
        ]
    more = len(rows) > limit
    return RejectedUploadPage(items=items,
                              next_cursor=cursors.encode([items[-1].id]) if more else None)
