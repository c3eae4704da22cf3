"""Lists: panels (filters and sort), the audit trail, and the refused uploads."""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Annotated
from urllib.parse import urlencode

from fastapi import APIRouter, Query, Request
from fastapi.responses import HTMLResponse

from app.api.deps import DbDep
from app.errors import DomainError, FieldError, InvalidInput
from app.pages.common import User, refused, render, require
from app.services import audit_trail, panels
from app.views.text import LEVELS, STATUSES

router = APIRouter(include_in_schema=False)
PAGE_SIZE = 50
SORTS = {"serial": "Serial", "ftb_current": "Current FTB",
         "p_final_over_limit": "P(final over limit)", "updated": "Updated"}


def _next(path: str, filters: dict[str, str], cursor: str | None) -> str | None:
    return f"{path}?{urlencode({**filters, 'cursor': cursor})}" if cursor else None


def _kept(**values: str) -> dict[str, str]:
    return {k: v.strip() for k, v in values.items() if v.strip()}


@router.get("/panels", response_class=HTMLResponse)
def panel_list(
    request: Request, db: DbDep, user: User,
    product: Annotated[str, Query(max_length=64)] = "",
    lot: Annotated[str, Query(max_length=64)] = "",
    status: Annotated[str, Query(max_length=16)] = "",
    risk: Annotated[str, Query(max_length=16)] = "",
    sort: Annotated[str, Query(max_length=24)] = "ftb_current",
    order: Annotated[str, Query(max_length=4)] = "desc",
    cursor: Annotated[str, Query(max_length=200)] = "",
) -> HTMLResponse:
    filters = _kept(product=product, lot=lot, status=status, risk=risk)
    try:
        require(user, "query")
        if status and status not in STATUSES:
            raise InvalidInput(f"status must be one of {', '.join(STATUSES)}")
        if risk and risk not in LEVELS:
            raise InvalidInput(f"risk must be one of {', '.join(LEVELS)}")
        page = panels.list_panels(db=db, sort=sort, descending=order == "desc",
                                  limit=PAGE_SIZE, cursor=cursor or None, **filters)
    except DomainError as exc:
        return refused(request, user, exc)
    kept = {**filters, "sort": sort, "order": order}
    return render(request, "panels.html", user, page=page, filters=filters, sort=sort,
                  order=order, sorts=SORTS, statuses=STATUSES, levels=LEVELS,
                  more=_next("/panels", kept, page.next_cursor))


def _since(value: str) -> datetime | None:
    """A time from the form: ISO 8601; without a zone it is read as UTC (the page says so)."""
    if not value.strip():
        return None
    try:
        when = datetime.fromisoformat(value.strip())
    except ValueError as exc:
        raise InvalidInput("since must be a date and time such as 2026-11-02T06:00",
                           [FieldError("not a date and time", pointer="query:/since")]) from exc
    return when if when.tzinfo else when.replace(tzinfo=UTC)


@router.get("/audit", response_class=HTMLResponse)
def audit_list(
    request: Request, db: DbDep, user: User,
    panel: Annotated[str, Query(max_length=64)] = "",
    hold: Annotated[str, Query(max_length=64)] = "",
    actor: Annotated[str, Query(max_length=100)] = "",
    since: Annotated[str, Query(max_length=40)] = "",
    cursor: Annotated[str, Query(max_length=200)] = "",
) -> HTMLResponse:
    filters = _kept(panel=panel, hold=hold, actor=actor, since=since)
    try:
        require(user, "read_audit")
        page = audit_trail.list_audit(db=db, panel=panel or None, hold=hold or None,
                                      actor=actor or None, since=_since(since),
                                      limit=PAGE_SIZE, cursor=cursor or None)
    except DomainError as exc:
        return refused(request, user, exc)
    return render(request, "audit.html", user, page=page, filters=filters,
                  more=_next("/audit", filters, page.next_cursor))


@router.get("/rejected-uploads", response_class=HTMLResponse)
def rejected_list(
    request: Request, db: DbDep, user: User,
    cursor: Annotated[str, Query(max_length=200)] = "",
) -> HTMLResponse:
    try:
        require(user, "read_rejections")
        page = audit_trail.list_rejections(db=db, principal=user.principal, limit=PAGE_SIZE,
                                           cursor=cursor or None)
    except DomainError as exc:
        return refused(request, user, exc)
    return render(request, "rejected.html", user, page=page,
                  everyone=user.principal.role == "admin",
                  more=_next("/rejected-uploads", {}, page.next_cursor))
