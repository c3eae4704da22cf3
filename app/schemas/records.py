"""The audit trail and the refused uploads, as read back (newest first, in cursor pages)."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from pydantic import BaseModel, Field


class AuditEntryRead(BaseModel):
    id: int
    at: datetime
    actor: str
    action: str = Field(description="hold, disposition_release|scrap|rework, panel_register, ...")
    subject: str = Field(description="The panel serial (or product code) acted on.")
    details: dict[str, Any] = Field(description="The figures and words of that moment.")


class AuditPage(BaseModel):
    items: list[AuditEntryRead]
    next_cursor: str | None = Field(default=None,
                                    description="Pass as ?cursor= to get the next page.")


class RejectedUploadRead(BaseModel):
    id: int
    received_at: datetime
    endpoint: str
    key_label: str
    status: int
    reason: str
    errors: list[dict[str, Any]]
    content_type: str
    body_bytes: int = Field(description="Size of the body as kept.")
    body_start: str = Field(description="The first 2,000 characters of the kept body "
                            "(UTF-8, undecodable bytes replaced).")


class RejectedUploadPage(BaseModel):
    items: list[RejectedUploadRead]
    next_cursor: str | None = Field(default=None,
                                    description="Pass as ?cursor= to get the next page.")
