"""One posted measurement: a batch of one through the pipeline (``app.services.intake``).

An Idempotency-Key works as ``app.services.idempotency`` describes.
"""

from __future__ import annotations

import hashlib

import numpy as np
from sqlalchemy.orm import Session

from app.db import Database
from app.errors import FieldError
from app.overlay.fit import OverlayFit
from app.schemas import codes
from app.schemas.measurements import FitRead, MeasurementCreate, MeasurementRead
from app.services import idempotency, intake, panels
from app.services.batch import GENEALOGY, JsonLocator, MeasurementBatch
from app.services.keys import Principal

#: The core's fit figures under their API names (docs/glossary.md).
_FIT_NAMES = {"m3s_x_um": "mean_plus_3sigma_x_um", "m3s_y_um": "mean_plus_3sigma_y_um",
              "max_residual_um": "largest_residual_um",
              "max_residual_at_mm": "largest_residual_at_mm"}


def fit_read(fit: OverlayFit) -> FitRead:
    figures = {_FIT_NAMES.get(k, k): v for k, v in fit.to_dict().items()}
    figures["model"] = codes.FIT_MODEL_NAMES[fit.model]
    figures["requested"] = codes.FIT_MODEL_NAMES[fit.requested]
    return FitRead(**figures)  # type: ignore[arg-type]


def _batch(data: MeasurementCreate) -> MeasurementBatch:
    columns = np.array([[s.x_mm, s.y_mm, s.dx_um, s.dy_um] for s in data.sites],
                       dtype=np.float64).reshape(-1, 4)
    return MeasurementBatch(
        panel=[data.panel], layer=np.array([data.layer], dtype=np.int64), side=[data.side],
        frame=[data.frame], exposure_tool=[data.exposure_tool], measured_at=[data.measured_at],
        counts=np.array([len(data.sites)], dtype=np.int64),
        x=columns[:, 0].copy(), y=columns[:, 1].copy(), dx=columns[:, 2].copy(),
        dy=columns[:, 3].copy(), locator=JsonLocator(),
        genealogy={name: [getattr(data, name)] for name in GENEALOGY},
    )


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
    key, owner = idempotency_key, principal.key_id
    if key is not None and (done := idempotency.stored(db, key=key, owner=owner,
                                                       digest=digest)) is not None:
        return True, MeasurementRead.model_validate(done)

    def describe(errors: list[FieldError]) -> str:
        return (f"measurement of panel '{data.panel}' layer {data.layer} side {data.side} was "
                f"not accepted: {errors[0].message}")

    plan = intake.prepare(db, _batch(data), describe=describe)

    def claim(session: Session) -> tuple[bool, MeasurementRead] | None:
        if key is None:
            return None
        done = idempotency.claim(session, key=key, owner=owner, digest=digest)
        return None if done is None else (True, MeasurementRead.model_validate(done))

    def answer(session: Session, outcome: intake.Outcome) -> tuple[bool, MeasurementRead]:
        old = outcome.superseded[0]
        read = MeasurementRead(
            id=str(outcome.ids[0]),
            panel=data.panel,
            layer=data.layer,
            side=data.side,
            exposure_tool=data.exposure_tool,
            measured_at=plan.times[0],
            received_at=outcome.received_at,
            superseded=str(old) if old else None,
            fit=fit_read(plan.fits[0]),
            panel_after=panels.to_read(session, outcome.panels[data.panel]),
        )
        if key is not None:
            idempotency.finish(session, key=key, owner=owner, response=read.model_dump(mode="json"))
        return False, read

    result = intake.write(db, plan, source="api", key_label=principal.label, first=claim,
                          answer=answer)
    assert isinstance(result, tuple)
    return result
