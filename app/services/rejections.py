"""Rejected uploads: each refused upload is kept with its body and reason, in a transaction of
its own (the refused request's transaction has been rolled back)."""

from __future__ import annotations

from typing import Any

from sqlalchemy import func, select

from app.db import Database
from app.services import limits
from app.store.tables import RejectedUpload

#: Bodies larger than this are kept truncated (the reason says so).
MAX_KEPT_BYTES = 4 * 1024 * 1024


def record(
    *, db: Database, endpoint: str, key_label: str, status: int, reason: str,
    errors: list[dict[str, Any]], content_type: str, body: bytes, truncated: bool = False,
) -> None:
    if truncated or len(body) > MAX_KEPT_BYTES:
        reason += f" [body kept truncated to its first {min(len(body), MAX_KEPT_BYTES)} bytes]"
        body = body[:MAX_KEPT_BYTES]
    with db.transaction() as session:
        session.add(RejectedUpload(
            endpoint=limits.fitted(endpoint, RejectedUpload.endpoint),
            key_label=limits.fitted(key_label, RejectedUpload.key_label),
            status=status, reason=limits.fitted(reason, RejectedUpload.reason),
            errors=errors[:200],
            content_type=limits.fitted(content_type, RejectedUpload.content_type), body=body,
        ))


def count(*, db: Database) -> int:
    with db.reading() as session:
        return int(session.scalar(select(func.count()).select_from(RejectedUpload)) or 0)


def latest(*, db: Database) -> RejectedUpload | None:
    with db.reading() as session:
        return session.scalars(select(RejectedUpload).order_by(RejectedUpload.id.desc())).first()
