from __future__ import annotations

from typing import Annotated, Literal

from fastapi import APIRouter
from fastapi import Query as QueryParam
from fastapi.responses import PlainTextResponse

from app.api.deps import DbDep, Disposition, ReadPanels
from app.api.problems import PROBLEM_RESPONSES
from app.schemas import codes
from app.schemas.holds import CAUTION, DispositionCreate, HoldList, HoldRead
from app.services import holds
from app.services.hold_list import holds_csv

router = APIRouter(prefix="/api/v1/holds", tags=["holds"], responses=PROBLEM_RESPONSES)

State = Annotated[Literal["open", "closed"], QueryParam(
    **codes.explained("Which holds.", codes.HOLD_STATES))]
Rule = Annotated[str | None, QueryParam(max_length=40, **codes.explained(
    "Only holds put on by this rule.", codes.HOLD_RULES))]


@router.get("", response_model=HoldList)
def list_holds(
    db: DbDep,
    _: ReadPanels,
    state: State = "open",
    limit: Annotated[int, QueryParam(ge=1, le=500)] = 50,
    cursor: str | None = None,
    product: Annotated[str | None, QueryParam(max_length=64)] = None,
    lot: Annotated[str | None, QueryParam(max_length=64)] = None,
    rule: Rule = None,
) -> HoldList:
    """The hold list, worst first then oldest first, with the disposition caution; paged;
    optionally one product's, lot's or rule's."""
    return holds.list_holds(db=db, state=state, limit=limit, cursor=cursor, product=product,
                            lot=lot, rule=rule)


@router.get(".csv", response_class=PlainTextResponse, responses={200: {
    "content": {"text/csv": {}},
    "headers": {"Stackledger-Caution": {"description": "Who decides dispositions",
                                        "schema": {"type": "string"}}}}})
def list_holds_csv(
    db: DbDep, _: ReadPanels, state: State = "open",
    product: Annotated[str | None, QueryParam(max_length=64)] = None,
    lot: Annotated[str | None, QueryParam(max_length=64)] = None,
    rule: Rule = None,
) -> PlainTextResponse:
    """The hold list as CSV (cells safe against formula injection); the same filters."""
    text = holds_csv(holds.list_all_holds(db=db, state=state, product=product, lot=lot,
                                          rule=rule))
    return PlainTextResponse(text, media_type="text/csv; charset=utf-8", headers={
        "Content-Disposition": 'attachment; filename="holds.csv"', "Stackledger-Caution": CAUTION,
    })


@router.post("/{hold_id}/disposition", response_model=HoldRead, summary="Record a disposition")
def record_disposition(hold_id: str, data: DispositionCreate, db: DbDep,
                       who: Disposition) -> HoldRead:
    """Release, scrap or rework a held panel, with a required note (supervisor or admin)."""
    return holds.dispose(db=db, hold_id=hold_id, data=data, principal=who)
