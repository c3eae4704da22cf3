"""The shift board: open holds, worst first then oldest, as the supervisor reads them at shift
start (the engineer sees it read-only)."""

from __future__ import annotations

from typing import Annotated
from urllib.parse import urlencode

from fastapi import APIRouter, Query, Request
from fastapi.responses import HTMLResponse

from app.api.deps import DbDep
from app.errors import DomainError
from app.pages.common import User, refused, render, require
from app.services import holds

router = APIRouter(include_in_schema=False)

PAGE_SIZE = 50


@router.get("/board", response_class=HTMLResponse)
def board(
    request: Request, db: DbDep, user: User,
    product: Annotated[str, Query(max_length=64)] = "",
    lot: Annotated[str, Query(max_length=64)] = "",
    rule: Annotated[str, Query(max_length=40)] = "",
    cursor: Annotated[str, Query(max_length=200)] = "",
) -> HTMLResponse:
    filters = {k: v.strip() for k, v in (("product", product), ("lot", lot), ("rule", rule))
               if v.strip()}
    try:
        require(user, "query")
        hold_list = holds.list_holds(db=db, state="open", limit=PAGE_SIZE,
                                     cursor=cursor or None, **filters)
    except DomainError as exc:
        return refused(request, user, exc)
    more = (f"/board?{urlencode({**filters, 'cursor': hold_list.next_cursor})}"
            if hold_list.next_cursor else None)
    return render(request, "board.html", user, holds=hold_list.holds, filters=filters,
                  rules=holds.HOLD_RULES, more=more, continued=bool(cursor),
                  csv_href=f"/api/v1/holds.csv?{urlencode(filters)}".rstrip("?"))
