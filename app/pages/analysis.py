"""The engineer's analysis pages: an exposure tool's fingerprint (its systematic site vectors
over the panel and its terms against the rest of the fleet) and the shares of FTB by layer and
side, tool and lot. Whoever may analyse (engineer, supervisor, admin) may read them, as in the
API; the server refuses everyone else."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Query, Request
from fastapi.responses import HTMLResponse

from app.api.deps import DbDep
from app.errors import DomainError, FieldError, InvalidInput, NotFound
from app.pages.choices import layer_choice, product_choice, side_choice
from app.pages.common import User, refused, render, require
from app.schemas.analysis import AnalysisFilter, FingerprintReport, FingerprintRow
from app.schemas.products import ProductRead
from app.services import analysis_ftb, analysis_tools, products
from app.views import charts
from app.views.bars import bar_chart_svg
from app.views.tool_views import (
    component_bars,
    fingerprint_arrows,
    lot_share_bars,
    share_bars,
    term_rows,
)

router = APIRouter(include_in_schema=False)
Text = Annotated[str, Query(max_length=64)]


def _tool(report: FingerprintReport, asked: str) -> str | None:
    """The tool asked for, else the one that adds most to FTB, else the first."""
    tools = sorted({r.exposure_tool for r in report.rows})
    if asked:
        if asked not in tools:
            raise NotFound(f"exposure tool '{asked}' made no run of product {report.product}",
                           [FieldError("no run of this tool", pointer="query:/exposure_tool")])
        return asked
    if report.what_if:
        return report.what_if[0].exposure_tool
    return tools[0] if tools else None


def _fingerprint_maps(product: ProductRead, row: FingerprintRow, side: str) -> dict[str, Any]:
    maps = {}
    for kind, figures, colour, words in (
            ("mean", row.terms_facing_side, charts.SIDE_A if side == "A" else charts.SIDE_B,
             "tool mean"),
            ("difference", row.difference_facing_side, charts.LIMIT, "tool minus fleet")):
        layer = f"layer {row.layer}" if row.layer is not None else "all layers"
        maps[kind] = charts.vector_map_svg(
            fingerprint_arrows(figures, product.check_points_mm),
            width_mm=product.panel_width_mm, height_mm=product.panel_height_mm,
            title=f"{row.exposure_tool}, side {side}, {layer}: {words}, facing-side frame",
            ident=f"fingerprint-{kind}", colour=colour, size_px=440, what=words,
            seen_from=f"side {side}")
    return maps


@router.get("/analysis/fingerprints", response_class=HTMLResponse)
def fingerprint_page(request: Request, db: DbDep, user: User, product: Text = "",
                     exposure_tool: Text = "", side: Annotated[str, Query(max_length=8)] = "A",
                     layer: Annotated[str, Query(max_length=3)] = "") -> HTMLResponse:
    try:
        require(user, "analyse")
        codes, chosen = product_choice(db, product)
        context: dict[str, Any] = {"products": codes, "product": chosen, "side": side,
                                   "layer": None, "tool": None, "row": None}
        if chosen is not None:
            info = products.get(db=db, code=chosen)
            picked_side = side_choice(side)
            picked_layer = layer_choice(layer, info.layers_per_side)
            report = analysis_tools.tool_fingerprints(
                db=db, filters=AnalysisFilter(product=chosen), by_layer=picked_layer is not None)
            picked_tool = _tool(report, exposure_tool)
            row = next((r for r in report.rows if (r.exposure_tool, r.side, r.layer) ==
                        (picked_tool, picked_side, picked_layer)), None)
            context.update(
                info=info, report=report, tool=picked_tool, layer=picked_layer,
                tools=sorted({r.exposure_tool for r in report.rows}), row=row,
                layers=range(1, info.layers_per_side + 1),
                terms=term_rows(row, model_terms=info.model_terms) if row else [],
                maps=_fingerprint_maps(info, row, picked_side) if row else {})
    except DomainError as exc:
        return refused(request, user, exc)
    return render(request, "fingerprints.html", user, **context)


@router.get("/analysis/shares", response_class=HTMLResponse)
def shares_page(request: Request, db: DbDep, user: User, product: Text = "") -> HTMLResponse:
    try:
        require(user, "analyse")
        codes, chosen = product_choice(db, product)
        context: dict[str, Any] = {"products": codes, "product": chosen, "report": None,
                                   "empty": None}
        if chosen is not None:
            try:
                report = analysis_ftb.ftb_shares(db=db, filters=AnalysisFilter(product=chosen))
            except InvalidInput as exc:  # too few panels with both sides: say so on the page
                context["empty"] = exc.detail
            else:
                axis = "Share of the mean FTB at the worst check point (%)"
                context.update(report=report, charts={
                    "layer-side": bar_chart_svg(
                        share_bars(report.by_layer_side), title="Shares of FTB by layer and side",
                        axis_label=axis, ident="shares-layer-side", label_width=70),
                    "tool": bar_chart_svg(
                        share_bars(report.by_exposure_tool), title="Shares of FTB by exposure tool",
                        axis_label=axis, ident="shares-tool", label_width=70),
                    "lot": bar_chart_svg(
                        lot_share_bars(report.by_lot),
                        title="Shares of each lot's mean FTB by exposure tool",
                        axis_label="Share of the lot's mean FTB at the worst check point (%)",
                        ident="shares-lot", label_width=150),
                    "components": bar_chart_svg(
                        component_bars(report.components),
                        title="Variance of the layer runs' FTB contributions by source",
                        axis_label="Share of the variance along the mean FTB (%)",
                        ident="shares-components", label_width=130),
                })
    except DomainError as exc:
        return refused(request, user, exc)
    return render(request, "shares.html", user, **context)
