"""Accepting one overlay measurement: check, mirror to the panel frame, fit, store, supersede,
and bring the panel's state up to date, all in one transaction.

Idempotency (after the IETF Idempotency-Key header draft): the first request with a key stores
its answer; a repeat with the same key and the same body gets that answer again (200); the same
key with a different body is refused (422). Keys are scoped to the API key that sent them.
"""

from __future__ import annotations

import hashlib
import uuid
from typing import Any

import numpy as np
from sqlalchemy import select, update
from sqlalchemy.orm import Session

from app.db import Database
from app.errors import Conflict, FieldError, InvalidInput
from app.overlay.fit import OverlayFit, fit_measurement, reach_of
from app.overlay.frames import mirror_sites
from app.schemas.measurements import FitRead, MeasurementCreate, MeasurementRead
from app.services import holds, panels, state
from app.services.keys import Principal
from app.services.products import check_points
from app.services.validation import check_measurement
from app.store import bulk
from app.store.tables import (
    Fit,
    IdempotencyRecord,
    Measurement,
    Panel,
    Product,
    Site,
    utcnow,
)


def fit_read(fit: OverlayFit) -> FitRead:
    return FitRead(**fit.to_dict())  # type: ignore[arg-type]


def fit_row(serial: str, measurement_id: uuid.UUID, fit: OverlayFit) -> dict[str, Any]:
    t = [float(v) for v in fit.terms]
    return {
        "panel": serial, "measurement_id": measurement_id, "model": fit.model,
        "requested": fit.requested, "note": fit.note,
        "tx": t[0], "ty": t[1], "sx": t[2], "sy": t[3],
        "ox": t[4], "oy": t[5], "kx": t[6], "ky": t[7],
        "mean_x_um": fit.mean_um[0], "mean_y_um": fit.mean_um[1],
        "sigma_x_um": fit.sigma_um[0], "sigma_y_um": fit.sigma_um[1],
        "max_residual_um": fit.max_residual_um,
        "max_residual_x_mm": fit.max_residual_at_mm[0],
        "max_residual_y_mm": fit.max_residual_at_mm[1],
        "leverage": fit.leverage,
    }


def supersede_current(
    session: Session, *, serial: str, layer: int, side: str, new_id: uuid.UUID
) -> uuid.UUID | None:
    """Mark the measurement in force for (panel, layer, side) as superseded by ``new_id``."""
    old = session.scalars(
        select(Measurement.id).where(
            Measurement.panel == serial,
            Measurement.layer == layer,
            Measurement.side == side,
            Measurement.superseded_by.is_(None),
        )
    ).one_or_none()
    if old is not None:
        session.execute(
            update(Measurement)
            .where(Measurement.panel == serial, Measurement.id == old)
            .values(superseded_by=new_id)
        )
    return old


def _locate(field: str, message: str, site: int | None) -> FieldError:
    pointer = f"/{field}" if site is None else f"/sites/{site}/{field}"
    return FieldError(message=message, pointer=pointer)


def accept(
    *,
    db: Database,
    data: MeasurementCreate,
    principal: Principal,
    body: bytes,
    idempotency_key: str | None = None,
) -> tuple[bool, MeasurementRead]:
    """Store one measurement; returns (whether this is a replay of a stored answer, answer)."""
    digest = hashlib.sha256(body).hexdigest()
    with db.transaction() as session:
        # The row lock serialises writers of one panel (PostgreSQL), so that each rebuilt state
        # sees every fit committed before it, and a repeat of an Idempotency-Key waits for the
        # first request and then finds its answer; SQLite's BEGIN IMMEDIATE already serialises.
        panel = session.get(Panel, data.panel, with_for_update=True)
        if idempotency_key is not None:
            record = session.get(IdempotencyRecord, (idempotency_key, principal.key_id))
            if record is not None:
                if record.body_sha256 != digest:
                    raise InvalidInput(
                        f"Idempotency-Key '{idempotency_key}' was already used with a different "
                        "body; use a new key for a new measurement"
                    )
                return True, MeasurementRead.model_validate(record.response)
        if panel is None:
            raise InvalidInput(
                f"panel '{data.panel}' is not registered; register it first with "
                "POST /api/v1/panels",
                [FieldError(message="unknown panel", pointer="/panel")],
            )
        if panel.status == "scrapped":
            raise Conflict(f"panel '{data.panel}' is scrapped; no further measurements are "
                           "accepted for it")
        product = session.get_one(Product, panel.product_id)
        raw = tuple(
            np.array([getattr(s, f) for s in data.sites], dtype=np.float64)
            for f in ("x_mm", "y_mm", "dx_um", "dy_um")
        )
        errors = check_measurement(
            product=product, layer=data.layer, side=data.side, frame=data.frame,
            x=raw[0], y=raw[1], dx=raw[2], dy=raw[3], locate=_locate,
        )
        if errors:
            raise InvalidInput(
                f"measurement of panel '{data.panel}' layer {data.layer} side {data.side} "
                f"was not accepted: {errors[0].message}",
                errors,
            )
        px, py, pdx, pdy = raw if data.frame == "panel" else mirror_sites(
            *raw, side=data.side, flip_axis=product.flip_axis)
        fit = fit_measurement(px, py, pdx, pdy, trapezoid=product.model_terms == 8,
                              reach_mm=reach_of(check_points(product)))
        new_id = uuid.uuid4()
        superseded = supersede_current(
            session, serial=panel.serial, layer=data.layer, side=data.side, new_id=new_id
        )
        received = utcnow()
        session.add(Measurement(
            panel=panel.serial, id=new_id, layer=data.layer, side=data.side, frame=data.frame,
            tool=data.tool, measured_at=data.measured_at, received_at=received,
            n_sites=len(data.sites), source="api", key_label=principal.label,
        ))
        session.flush()
        bulk.insert(session, Site.__table__, [
            (panel.serial, new_id, i, *map(float, r), *map(float, p))
            for i, (r, p) in enumerate(zip(zip(*raw, strict=True),
                                           zip(px, py, pdx, pdy, strict=True), strict=True))
        ])
        session.add(Fit(**fit_row(panel.serial, new_id, fit)))
        session.flush()
        panel_state, assessment = state.refresh(session, panel=panel, product=product)
        holds.apply_automatic(session, panel=panel, state=panel_state, assessment=assessment)
        answer = MeasurementRead(
            id=str(new_id), panel=panel.serial, layer=data.layer, side=data.side,
            tool=data.tool, measured_at=data.measured_at, received_at=received,
            superseded=str(superseded) if superseded else None,
            fit=fit_read(fit), state=panels.to_read(session, panel),
        )
        if idempotency_key is not None:
            session.add(IdempotencyRecord(
                key=idempotency_key, key_owner=principal.key_id, body_sha256=digest,
                status_code=201, response=answer.model_dump(mode="json"),
            ))
        return False, answer
