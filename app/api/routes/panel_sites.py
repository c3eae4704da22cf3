from __future__ import annotations

from typing import Annotated, Literal

from fastapi import APIRouter
from fastapi import Query as QueryParam

from app.api.deps import DbDep, ReadPanels
from app.api.problems import PROBLEM_RESPONSES
from app.schemas.sites import PanelSitesRead
from app.services import site_maps

router = APIRouter(prefix="/api/v1/panels", tags=["panels"], responses=PROBLEM_RESPONSES)


@router.get("/{serial}/sites", response_model=PanelSitesRead)
def panel_sites(
    serial: str, db: DbDep, _: ReadPanels, side: Literal["A", "B"] | None = None,
    layer: Annotated[int | None, QueryParam(ge=1, le=64)] = None,
) -> PanelSitesRead:
    """Measured and residual site vectors (panel frame) of the measurements in force."""
    return site_maps.panel_sites(db=db, serial=serial, side=side, layer=layer)
