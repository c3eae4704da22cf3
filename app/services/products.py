"""Products: the stack-up, frames and limits every panel of the product is judged by."""

from __future__ import annotations

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session

from app.db import Database
from app.errors import Conflict, NotFound
from app.overlay.stack import default_check_points
from app.schemas.products import Connection, ProductCreate, ProductRead
from app.services import audit
from app.store.tables import Product


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
        p_watch_leave=product.p_watch_leave,
        p_at_risk_leave=product.p_at_risk_leave,
        connection=Connection(**product.connection) if product.connection else None,
        created_at=product.created_at,
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
    with db.transaction() as session:
        existing = session.scalars(select(Product).where(Product.code == data.code)).one_or_none()
        fields = data.model_dump(exclude={"check_points_mm", "connection"})
        connection = data.connection.model_dump() if data.connection else None
        if existing is not None:
            same = all(getattr(existing, k) == v for k, v in fields.items()) and (
                existing.connection == connection
                and [tuple(p) for p in existing.check_points_mm] == [tuple(p) for p in points]
            )
            if not same:
                raise Conflict(f"product '{data.code}' exists with different settings")
            return False, to_read(existing)
        product = Product(
            **fields, check_points_mm=[list(p) for p in points], connection=connection
        )
        session.add(product)
        session.flush()
        audit.record(session, actor=actor, action="product_create", subject=data.code,
                     details=fields)
        return True, to_read(product)


def get(*, db: Database, code: str) -> ProductRead:
    with db.reading() as session:
        return to_read(get_by_code_or_raise(session, code))
