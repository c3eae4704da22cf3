"""Panels: registration, the stored state as read by engineers and supervisors, and lists."""

from __future__ import annotations

from dataclasses import asdict
from typing import Any

import numpy as np
from sqlalchemy import Select, and_, or_, select
from sqlalchemy.orm import Session

from app.db import Database
from app.errors import Conflict, FieldError, InvalidInput, NotFound
from app.overlay.capture import InterfaceCapture
from app.overlay.model import evaluate, report_units
from app.schemas import codes
from app.schemas.figures import LayersReached
from app.schemas.panels import (
    ForecastRead,
    FtbPoint,
    PanelCreate,
    PanelPage,
    PanelRead,
    SidesInt,
    StackLayerRead,
    StackRead,
)
from app.services import audit, panel_estimate
from app.services import cursor as cursors
from app.services.lifecycle import PanelStatus
from app.services.products import get_by_code_or_raise
from app.store.stored import StoredForecast
from app.store.tables import Lot, Panel, PanelEstimate, Product, utcnow
from app.store.upsert import insert_ignore

SORTS = {
    "serial": (Panel.serial,),
    "ftb_current": (PanelEstimate.ftb_worst_um,),
    "p_final_over_limit": (PanelEstimate.p_exceed,),
    "updated": (PanelEstimate.updated_at,),
}


def get_or_raise(session: Session, serial: str) -> Panel:
    panel = session.get(Panel, serial)
    if panel is None:
        raise NotFound(f"no panel with serial '{serial}'")
    return panel


def _empty_state(panel: Panel) -> PanelEstimate:
    """The state of a registered panel with no measurement yet."""
    return PanelEstimate(
        panel=panel.serial, layers_a=[], layers_b=[], missing_a=[], missing_b=[],
        ftb_worst_um=0.0, ftb_worst_x_mm=0.0, ftb_worst_y_mm=0.0, ftb_points=[],
        l2l_worst_um=0.0, stack=None, forecast=None, p_exceed=None, risk="clear",
        risk_rule="clear", reasons=["No measurement yet."], updated_at=utcnow(),
    )


def read_model(panel: Panel, product_code: str, lot_code: str, st: PanelEstimate) -> PanelRead:
    return PanelRead(
        serial=panel.serial,
        product=product_code,
        lot=lot_code,
        status=panel.status,  # type: ignore[arg-type]
        layers_reached=LayersReached(A=max(st.layers_a, default=0), B=max(st.layers_b, default=0)),
        missing_layers=SidesInt(A=st.missing_a, B=st.missing_b),
        ftb_current_um=st.ftb_worst_um,
        ftb_current_at_mm=(st.ftb_worst_x_mm, st.ftb_worst_y_mm),
        ftb_current_points=[FtbPoint(**p.model_dump()) for p in st.ftb_points],
        l2l_worst_um=st.l2l_worst_um,
        risk=st.risk,  # type: ignore[arg-type]
        risk_rule=st.risk_rule,
        reasons=st.reasons,
        forecast=forecast_read(st.forecast) if st.forecast else None,
        updated_at=st.updated_at,
    )


def forecast_read(f: StoredForecast) -> ForecastRead:
    return ForecastRead(
        ftb_final_forecast_um=f.final_worst_um, ftb_final_band_um=f.band_um,
        p_final_over_limit=f.p_exceed, p_final_over_limit_stderr=f.p_exceed_stderr,
        samples=f.samples, layers_to_come=SidesInt(A=f.remaining.A, B=f.remaining.B),
        method=f.method)


def to_read(session: Session, panel: Panel) -> PanelRead:
    product = session.get_one(Product, panel.product_id)
    lot = session.get_one(Lot, panel.lot_id)
    st = session.get(PanelEstimate, panel.serial) or _empty_state(panel)
    return read_model(panel, product.code, lot.code, st)


def create(*, db: Database, data: PanelCreate, actor: str) -> tuple[bool, PanelRead]:
    """Register a panel; returns (created, panel). An identical repeat is not an error.

    Lot and panel are inserted with "do nothing on conflict" and then read, so identical
    registrations sent at the same moment all succeed (one 201, the others 200) instead of
    failing on a duplicate key.
    """
    with db.transaction() as session:
        product = get_by_code_or_raise(session, data.product)
        insert_ignore(session, Lot, {"code": data.lot, "product_id": product.id,
                                     "created_at": utcnow()})
        lot = session.scalars(select(Lot).where(Lot.code == data.lot)).one()
        if lot.product_id != product.id:
            raise Conflict(f"lot '{data.lot}' belongs to another product")
        created = insert_ignore(session, Panel, {
            "serial": data.serial, "product_id": product.id, "lot_id": lot.id,
            "status": PanelStatus.IN_PROCESS, "revision": 0, "created_at": utcnow()})
        panel = session.scalars(select(Panel).where(Panel.serial == data.serial)
                                .execution_options(populate_existing=True)).one()
        if not created:
            if panel.product_id != product.id or panel.lot_id != lot.id:
                raise Conflict(
                    f"panel '{data.serial}' is already registered to another product or lot"
                )
            return False, to_read(session, panel)
        # Every panel has a state from the start, so lists, filters and sorts see it as clear.
        session.add(_empty_state(panel))
        audit.record(session, actor=actor, action="panel_register", subject=data.serial,
                     details={"product": data.product, "lot": data.lot})
        session.flush()
        return True, to_read(session, panel)


def get(*, db: Database, serial: str) -> PanelRead:
    with db.reading() as session:
        return to_read(session, get_or_raise(session, serial))


def list_panels(
    *,
    db: Database,
    product: str | None = None,
    lot: str | None = None,
    status: str | None = None,
    risk: str | None = None,
    sort: str = "serial",
    descending: bool = False,
    limit: int = 50,
    cursor: str | None = None,
) -> PanelPage:
    """Filtered, sorted panels with keyset (cursor) pagination; ties broken by serial."""
    if sort not in SORTS:
        raise InvalidInput(f"sort must be one of {', '.join(SORTS)}, got '{sort}'")
    (key,) = SORTS[sort]
    with db.reading() as session:
        query: Select[Any] = (
            select(Panel, Product.code, Lot.code, PanelEstimate)
            .join(Product, Product.id == Panel.product_id)
            .join(Lot, Lot.id == Panel.lot_id)
            .outerjoin(PanelEstimate, PanelEstimate.panel == Panel.serial)
        )
        if product:
            query = query.where(Product.code == product)
        if lot:
            query = query.where(Lot.code == lot)
        if status:
            query = query.where(Panel.status == status)
        if risk:
            query = query.where(PanelEstimate.risk == risk)
        if sort == "p_final_over_limit":
            query = query.where(key.is_not(None))  # a panel with no measurement has no forecast
        if cursor:
            read_key = {"serial": cursors.text, "updated": cursors.instant}.get(sort,
                                                                               cursors.number)
            last_key, last_serial = cursors.decode(cursor, read_key, cursors.text)
            beyond = key < last_key if descending else key > last_key
            tie = Panel.serial < last_serial if descending else Panel.serial > last_serial
            query = query.where(or_(beyond, and_(key == last_key, tie)))
        order = [key.desc(), Panel.serial.desc()] if descending else [key, Panel.serial]
        rows = session.execute(query.order_by(*order).limit(limit + 1)).all()
        items = []
        for panel, product_code, lot_code, st in rows[:limit]:
            st = st or _empty_state(panel)
            items.append(read_model(panel, product_code, lot_code, st))
        next_cursor = None
        if len(rows) > limit:
            last = rows[limit - 1]
            value = {
                "serial": last[0].serial,
                "ftb_current": last[3].ftb_worst_um if last[3] else None,
                "p_final_over_limit": last[3].p_exceed if last[3] else None,
                "updated": last[3].updated_at.isoformat() if last[3] else None,
            }[sort]
            next_cursor = cursors.encode([value, last[0].serial])
        return PanelPage(items=items, next_cursor=next_cursor)



def lot_members(*, db: Database, lot: str, most: int = 5000) -> list[PanelRead]:
    """Every panel of a lot, worst current FTB first, up to ``most`` (a lot is tens of panels;
    the cap keeps a mistaken giant lot from reading the whole store); NotFound when none."""
    page = list_panels(db=db, lot=lot, sort="ftb_current", descending=True, limit=200)
    items = list(page.items)
    while page.next_cursor and len(items) < most:
        page = list_panels(db=db, lot=lot, sort="ftb_current", descending=True, limit=200,
                           cursor=page.next_cursor)
        items += page.items
    if not items:
        raise NotFound(f"unknown lot '{lot}'", [FieldError("no panel in this lot",
                                                           pointer="path:/lot")])
    return items[:most]

def stack(*, db: Database, serial: str) -> StackRead:
    """Per side and layer: the fit in force, its L2L worst and the cumulative FTB worst."""
    with db.reading() as session:
        panel = get_or_raise(session, serial)
        st = session.get(PanelEstimate, serial)
        layers = panel_estimate.current_layers(session, serial)
        summary = st.stack if st is not None else None
        worst_at = (st.ftb_worst_x_mm, st.ftb_worst_y_mm) if st is not None else (0.0, 0.0)
        faces = {(c.side, c.layer): c for c in summary.capture} if summary else {}
        out: list[StackLayerRead] = []
        for side in ("A", "B"):
            l2l = getattr(summary.l2l_worst_um, side) if summary else {}
            position = np.zeros(2)
            for k in sorted(layers[side]):
                f = layers[side][k]
                report = report_units(f.terms)
                # The side's outermost layer relative to the core at the worst check point:
                # the sum of its layer models there (docs/conventions.md, accumulation).
                dx, dy = evaluate(f.terms, np.array([worst_at[0]]), np.array([worst_at[1]]))
                position += (float(dx[0]), float(dy[0]))
                out.append(StackLayerRead(
                    side=side,  # type: ignore[arg-type]
                    layer=k,
                    measurement_id=str(f.measurement_id),
                    exposure_tool=f.exposure_tool,
                    measured_at=f.measured_at,
                    model=codes.FIT_MODEL_NAMES[f.model],
                    note=f.note,
                    tx_um=report["tx_um"],
                    ty_um=report["ty_um"],
                    sx_ppm=report["sx_ppm"],
                    sy_ppm=report["sy_ppm"],
                    rotation_urad=report["rotation_urad"],
                    nonorthogonality_urad=report["nonorthogonality_urad"],
                    kx_um_per_mm2=report["kx_um_per_mm2"],
                    ky_um_per_mm2=report["ky_um_per_mm2"],
                    sigma_x_um=f.sigma_um[0],
                    sigma_y_um=f.sigma_um[1],
                    l2l_worst_um=l2l[k],
                    ftb_through_layer_um=_cumulative_at(summary.cumulative_worst_um, k)
                    if summary else 0.0,
                    side_position_um=(float(position[0]), float(position[1])),
                    **_capture_read(faces.get((side, k))),
                ))
        return StackRead(
            serial=panel.serial,
            ftb_current_at_mm=worst_at,
            layers=out,
            residual_sigma_um=summary.residual_sigma_um if summary else (0.0, 0.0),
            linear_worst_case_um=summary.linear_worst_case_um if summary else 0.0,
            rss_um=summary.rss_um if summary else 0.0,
            stacked_via=asdict(summary.stacked_via) if summary and summary.stacked_via else None,
        )


def _capture_read(face: InterfaceCapture | None) -> dict[str, Any]:
    """StackLayerRead's capture fields from the stored interface figures."""
    if face is None:
        return {}
    return {
        "fit_se_um": face.model_se_um, "capture_margin_um": face.margin_um,
        "p_miss": face.p_miss, "p_miss_at_mm": face.p_miss_at_mm,
        "overhang_um": face.overhang_um, "overlap_fraction": face.overlap_fraction,
        "contact_resistance_ratio": face.resistance_ratio,
    }


def _cumulative_at(cumulative: list[float], k: int) -> float:
    """Worst FTB over layers 1..k of both sides (entry k-1, stored dense by layer number)."""
    return float(cumulative[k - 1]) if k - 1 < len(cumulative) else 0.0
