from __future__ import annotations

from typing import Annotated, Literal

from fastapi import APIRouter, Query, Response

from app.api.deps import DbDep, PlaceHold, ReadPanels, RegisterPanel
from app.api.problems import PROBLEM_RESPONSES
from app.schemas import codes
from app.schemas.holds import HoldCreate, HoldRead
from app.schemas.panels import PanelCreate, PanelPage, PanelRead, PanelStatus, RiskLevel, StackRead
from app.services import holds, panels

router = APIRouter(prefix="/api/v1/panels", tags=["panels"], responses=PROBLEM_RESPONSES)


@router.post("", response_model=PanelRead, status_code=201,
             responses={200: {"model": PanelRead, "description": "Identical repeat"}})
def register_panel(data: PanelCreate, db: DbDep, who: RegisterPanel,
                   response: Response) -> PanelRead:
    """Register a panel by its serial; an identical repeat answers 200, a conflicting one 409."""
    created, panel = panels.create(db=db, data=data, actor=who.label)
    if not created:
        response.status_code = 200
    return panel


@router.get("", response_model=PanelPage)
def list_panels(
    db: DbDep,
    _: ReadPanels,
    product: str | None = None,
    lot: str | None = None,
    status: Annotated[PanelStatus | None, Query(**codes.explained(
        "Only panels with this status.", codes.PANEL_STATUSES))] = None,
    risk: Annotated[RiskLevel | None, Query(**codes.explained(
        "Only panels at this risk level.", codes.RISK_LEVELS))] = None,
    sort: Literal["serial", "ftb_current", "p_final_over_limit", "updated"] = "serial",
    order: Literal["asc", "desc"] = "asc",
    limit: Annotated[int, Query(ge=1, le=500)] = 50,
    cursor: str | None = None,
) -> PanelPage:
    """Panels with filters, sorting and cursor pagination."""
    return panels.list_panels(
        db=db, product=product, lot=lot, status=status, risk=risk, sort=sort,
        descending=order == "desc", limit=limit, cursor=cursor,
    )


@router.get("/{serial}", response_model=PanelRead)
def get_panel(serial: str, db: DbDep, _: ReadPanels) -> PanelRead:
    """A panel's running estimate: layers, FTB at the check points, risk and forecast."""
    return panels.get(db=db, serial=serial)


@router.get("/{serial}/stack", response_model=StackRead)
def get_stack(serial: str, db: DbDep, _: ReadPanels) -> StackRead:
    """Per side and layer: the fit in force, its L2L worst and the cumulative FTB worst."""
    return panels.stack(db=db, serial=serial)


@router.post("/{serial}/holds", response_model=HoldRead, status_code=201)
def place_hold(serial: str, data: HoldCreate, db: DbDep, who: PlaceHold) -> HoldRead:
    """Put a panel on hold by hand, with a reason (engineer or above)."""
    return holds.place(db=db, serial=serial, data=data, principal=who)
