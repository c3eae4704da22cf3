"""Lots: the lots of a product with their figures, and one lot's summary (its panels by risk
level, the FTB histogram against the limit, the forecast yield, links to every panel)."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Query, Request
from fastapi.responses import HTMLResponse

from app.api.deps import DbDep
from app.errors import DomainError
from app.pages.choices import product_choice
from app.pages.common import User, refused, render, require
from app.schemas.analysis import AnalysisFilter
from app.schemas.panels import PanelRead
from app.services import analysis_lots, panels, products
from app.views.bars import histogram_svg
from app.views.text import LEVELS

router = APIRouter(include_in_schema=False)


@router.get("/lots", response_class=HTMLResponse)
def lot_list(request: Request, db: DbDep, user: User,
             product: Annotated[str, Query(max_length=64)] = "") -> HTMLResponse:
    try:
        require(user, "analyse")
        codes, chosen = product_choice(db, product)
        report = (analysis_lots.lot_summary(db=db, filters=AnalysisFilter(product=chosen))
                  if chosen is not None else None)
    except DomainError as exc:
        return refused(request, user, exc)
    return render(request, "lots.html", user, products=codes, product=chosen, report=report,
                  levels=LEVELS)


@router.get("/lots/{lot}", response_class=HTMLResponse)
def lot_page(request: Request, lot: str, db: DbDep, user: User) -> HTMLResponse:
    try:
        require(user, "query")
        require(user, "analyse")
        members = panels.lot_members(db=db, lot=lot)
        product = products.get(db=db, code=members[0].product)
        report = analysis_lots.lot_summary(
            db=db, filters=AnalysisFilter(product=product.code, lot=lot))
    except DomainError as exc:
        return refused(request, user, exc)
    by_level: dict[str, list[PanelRead]] = {level: [] for level in LEVELS}
    for p in members:
        by_level.setdefault(p.risk, []).append(p)
    measured = [p for p in members if p.layers_reached.A or p.layers_reached.B]
    histogram = histogram_svg(
        [p.ftb_current_um for p in measured], limit=product.ftb_limit_um,
        title=f"Current FTB of the panels of lot {lot}", ident="lot-histogram",
        axis_label="Current FTB at its check point (µm)", limit_label="FTB limit")
    return render(request, "lot.html", user, lot=lot, product=product, panels=members,
                  by_level=by_level, levels=LEVELS, row=report.lots[0] if report.lots else None,
                  histogram=histogram, measured=len(measured))
