"""Products: the stack-up, frames and limits every panel of the product is judged by."""

from __future__ import annotations

from typing import Any

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session

from app.db import Database
from app.errors import Conflict, NotFound
from app.overlay.capture import ViaGeometry
from app.overlay.stack import default_check_points
from app.schemas.products import ProductCreate, ProductList, ProductRead, Vias
from app.services import audit
from app.store.tables import Product, utcnow
from app.store.upsert import insert_ignore


def to_read(product: Product) -> ProductRead:
    return ProductRead(
        code=product.code,
        name=product.name,
        layers_per_side=product.layers_per_side,
        flip_axis=product.flip_axis,  # type: ignore[arg-type]
        panel_width_mm=product.panel_width_mm,
        panel_height_mm=product.panel_height_mm,
        ftb_limit_um=product.ftb_limit_um,
        l2l_limit_um=product.l2l_limit_um,
        model_terms=product.model_terms,
        check_points_mm=[(float(x), float(y)) for x, y in product.check_points_mm],
        p_watch=product.p_watch,
        p_at_risk=product.p_at_risk,
        vias=_vias(product),
        p_watch_leave=product.p_watch_leave,
        p_at_risk_leave=product.p_at_risk_leave,
        created_at=product.created_at,
    )


def _vias(product: Product) -> Vias | None:
    if product.via_diameter_um is None or product.pad_diameter_um is None:
        return None
    return Vias(
        via_diameter_um=product.via_diameter_um,
        pad_diameter_um=product.pad_diameter_um,
        layers=product.via_layers or [],  # type: ignore[arg-type]
        copper_thickness_um=product.copper_thickness_um,
        pad_width_um=product.pad_width_um,
        via_depth_um=product.via_depth_um,
        resistivity_ohm_m=product.resistivity_ohm_m,
    )


def _via_columns(vias: Vias | None) -> dict[str, Any]:
    """The Product columns of via settings (all None without them)."""
    if vias is None:
        return {"via_diameter_um": None, "pad_diameter_um": None, "via_layers": None,
                "copper_thickness_um": None, "pad_width_um": None, "via_depth_um": None,
                "resistivity_ohm_m": None}
    return {**vias.model_dump(exclude={"layers"}),
            "via_layers": [v.model_dump() for v in vias.layers]}


def via_geometry(product: Product) -> ViaGeometry | None:
    """The product's via and pad diameters for the core, or None without via settings."""
    if product.via_diameter_um is None or product.pad_diameter_um is None:
        return None
    return ViaGeometry(
        product.via_diameter_um,
        product.pad_diameter_um,
        {int(v["layer"]): (float(v["via_diameter_um"]), float(v["pad_diameter_um"]))
         for v in product.via_layers or []},
    )


def get_by_code_or_raise(session: Session, code: str) -> Product:
    product = session.scalars(select(Product).where(Product.code == code)).one_or_none()
    if product is None:
        raise NotFound(f"no product with code '{code}'")
    return product


def check_points(product: Product) -> np.ndarray:
    return np.asarray(product.check_points_mm, dtype=np.float64).reshape(-1, 2)


def create(*, db: Database, data: ProductCreate, actor: str) -> tuple[bool, ProductRead]:
    """Register a product; returns (created, product). An identical repeat returns the stored
    one; a different one is 409."""
    points = data.check_points_mm
    if points is None:
        grid = default_check_points(data.panel_width_mm, data.panel_height_mm)
        points = [(round(float(x), 6), round(float(y), 6)) for x, y in grid]
    fields = {**data.model_dump(exclude={"check_points_mm", "vias"}), **_via_columns(data.vias)}
    stored_points = [list(p) for p in points]
    with db.transaction() as session:
        # Insert-or-nothing, then read: identical products posted at the same moment all get
        # an answer (one 201, the rest 200) instead of a duplicate-key failure.
        created = insert_ignore(session, Product, {
            **fields, "check_points_mm": stored_points, "history_revision": 0,
            "created_at": utcnow()})
        product = session.scalars(select(Product).where(Product.code == data.code)
                                  .execution_options(populate_existing=True)).one()
        if not created:
            same = all(getattr(product, k) == v for k, v in fields.items()) and (
                [tuple(p) for p in product.check_points_mm] == [tuple(p) for p in points]
            )
            if not same:
                raise Conflict(f"product '{data.code}' exists with different settings")
            return False, to_read(product)
        audit.record(session, actor=actor, action="product_create", subject=data.code,
                     details=fields)
        return True, to_read(product)


def list_products(*, db: Database) -> ProductList:
    """Every product, by code (a fab runs tens of products, not thousands: no pages)."""
    with db.reading() as session:
        return ProductList(items=[to_read(p) for p in session.scalars(
            select(Product).order_by(Product.code))])


def get(*, db: Database, code: str) -> ProductRead:
    with db.reading() as session:
        return to_read(get_by_code_or_raise(session, code))
