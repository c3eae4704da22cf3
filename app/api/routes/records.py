"""The audit trail and the refused uploads, read back."""

from __future__ import annotations

from datetime import datetime
from typing import Annotated

from fastapi import APIRouter
from fastapi import Query as QueryParam

from app.api.deps import DbDep, ReadAudit, ReadRejections
from app.api.problems import PROBLEM_RESPONSES
from app.schemas.records import AuditPage, RejectedUploadPage
from app.services import audit_trail

router = APIRouter(prefix="/api/v1", responses=PROBLEM_RESPONSES)


@router.get("/audit", response_model=AuditPage, tags=["audit"])
def list_audit(
    db: DbDep,
    _: ReadAudit,
    panel: Annotated[str | None, QueryParam(max_length=64)] = None,
    hold: Annotated[str | None, QueryParam(max_length=64, description="A hold id")] = None,
    actor: Annotated[str | None, QueryParam(max_length=100)] = None,
    since: Annotated[datetime | None, QueryParam(description="ISO 8601 with a time zone")] = None,
    limit: Annotated[int, QueryParam(ge=1, le=500)] = 50,
    cursor: Annotated[str | None, QueryParam(max_length=200)] = None,
) -> AuditPage:
    """The audit trail, newest first, filtered by panel, hold, actor and time; paged."""
    return audit_trail.list_audit(db=db, panel=panel, hold=hold, actor=actor, since=since,
                                  limit=limit, cursor=cursor)


@router.get("/rejected-uploads", response_model=RejectedUploadPage, tags=["imports"])
def list_rejected_uploads(
    db: DbDep,
    who: ReadRejections,
    limit: Annotated[int, QueryParam(ge=1, le=500)] = 50,
    cursor: Annotated[str | None, QueryParam(max_length=200)] = None,
) -> RejectedUploadPage:
    """Refused uploads, newest first: your own key's, or all of them for an admin; paged."""
    return audit_trail.list_rejections(db=db, principal=who, limit=limit, cursor=cursor)
