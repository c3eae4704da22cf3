"""The hold and panel page: status, risk and reasons, the stack walk, the vector maps, the layer
table, the disposition form for a supervisor, and the panel's audit trail."""

from __future__ import annotations

import re
from typing import Annotated, Any

from fastapi import APIRouter, Query, Request
from fastapi.responses import HTMLResponse

from app.api.deps import DbDep
from app.errors import DomainError, InvalidInput
from app.pages.common import SignedIn, User, refused, render, require
from app.schemas.panels import PanelRead
from app.schemas.products import ProductRead
from app.services import audit_trail, holds, panels, products, site_maps
from app.views import charts
from app.views.layers import layer_rows

router = APIRouter(include_in_schema=False)
_MAP = re.compile(r"^([AB])([1-9][0-9]?)$")


def _chosen_map(panel: PanelRead, choice: str) -> tuple[str, int] | None:
    """The side and layer whose site map is shown: asked for, else the last layer built."""
    if choice:
        match = _MAP.match(choice)
        if match is None:
            raise InvalidInput(f"map must be a side and layer such as 'A3', got '{choice}'")
        return match.group(1), int(match.group(2))
    a, b = panel.layers_reached.A, panel.layers_reached.B
    if not (a or b):
        return None
    return ("B", b) if b >= a and b else ("A", a)


def panel_context(db: DbDep, serial: str, choice: str, user: SignedIn) -> dict[str, Any]:
    """Everything the panel page shows, from the services the API answers with."""
    panel = panels.get(db=db, serial=serial)
    stack = panels.stack(db=db, serial=serial)
    product: ProductRead = products.get(db=db, code=panel.product)
    chosen = _chosen_map(panel, choice)
    sites = (site_maps.panel_sites(db=db, serial=serial, side=chosen[0], layer=chosen[1])
             if chosen else None)
    layer_sites = sites.layers[0] if sites and sites.layers else None
    ftb_arrows = [charts.Arrow(p.x_mm, p.y_mm, p.dx_um, p.dy_um) for p in panel.ftb_current_points]
    maps = {}
    if layer_sites is not None:
        side, layer = layer_sites.side, layer_sites.layer
        arrows = {
            "measured": [charts.Arrow(s.x_mm, s.y_mm, s.dx_um, s.dy_um)
                         for s in layer_sites.sites],
            "residual": [charts.Arrow(s.x_mm, s.y_mm, s.residual_dx_um, s.residual_dy_um)
                         for s in layer_sites.sites],
        }
        colours = {"measured": charts.SIDE_A if side == "A" else charts.SIDE_B,
                   "residual": charts.LIMIT}
        for kind in arrows:
            maps[kind] = charts.vector_map_svg(
                arrows[kind], colour=colours[kind],
                width_mm=product.panel_width_mm, height_mm=product.panel_height_mm,
                title=f"Side {side} layer {layer}: {kind} site vectors",
                ident=f"map-{kind}", size_px=400, what=f"{kind} vector")
    return {
        "panel": panel, "stack": stack, "product": product,
        "hold_history": holds.for_panel(db=db, serial=serial),
        "trail": audit_trail.list_audit(db=db, panel=serial, limit=100).items,
        "stack_walk": charts.stack_walk_svg(
            stack, panel, ftb_limit_um=product.ftb_limit_um,
            layers_per_side=product.layers_per_side),
        "ftb_map": charts.vector_map_svg(
            ftb_arrows, width_mm=product.panel_width_mm, height_mm=product.panel_height_mm,
            title="FTB at the check points", ident="ftb-map", size_px=420,
            mark=panel.ftb_current_at_mm if ftb_arrows else None, what="FTB"),
        "site_maps": maps, "layer_sites": layer_sites,
        "map_choices": [f"{s}{k}" for s in ("A", "B")
                        for k in range(1, getattr(panel.layers_reached, s) + 1)
                        if k not in getattr(panel.missing_layers, s)],
        "rows": layer_rows(stack.layers, flip_axis=product.flip_axis),
        "may_dispose": user.may("disposition"),
    }


@router.get("/panels/{serial}", response_class=HTMLResponse)
def panel_page(request: Request, serial: str, db: DbDep, user: User,
               map: Annotated[str, Query(max_length=4)] = "",
               disposed: Annotated[str, Query(max_length=10, description="The disposition "
                                              "just recorded (after the form)")] = ""
               ) -> HTMLResponse:
    try:
        require(user, "query")
        context = panel_context(db, serial, map, user)
        context["disposed"] = disposed if disposed in ("release", "scrap", "rework") else ""
    except DomainError as exc:
        return refused(request, user, exc)
    return render(request, "panel.html", user, **context)
