"""Holds and disposition.

- Automatic hold: when a panel's risk enters at_risk or over_limit and it has no open hold. The
  rule and the figures of that moment are kept with the hold.
- A released panel is not held again for the same rule unless its p_exceed or its current FTB
  has become worse than at release.
- Manual hold: an engineer, with a reason.
- Disposition (supervisor): release, scrap, or rework of a named layer and side. Rework sets
  that layer's measurement in force aside (its ``superseded_by`` is the hold's id: superseded by
  the rework, kept like every superseded measurement), recomputes the panel's FTB, forecast and
  risk without it, so the layer counts as still to come, and puts the panel back in process;
  the layer's next measurement takes its place through the normal upload. The recomputed risk
  does not hold the panel again in the same step (the supervisor has just decided); the next
  measurement is judged by the usual rules. A note is required; every change is in the audit log
  with who, when, what and the figures (after the rework too).

The tool supports these decisions; they rest with the fab's own quality procedures and
qualified engineers (``app.schemas.holds.CAUTION``).
"""

from __future__ import annotations

import uuid
from typing import Any, Final

from sqlalchemy import ColumnElement, Row, Select, and_, or_, select
from sqlalchemy.orm import Session

from app.db import Database
from app.errors import Conflict, FieldError, InvalidInput, NotFound
from app.overlay.risk import RULES, RiskAssessment, severity
from app.schemas.figures import LayersReached
from app.schemas.holds import DispositionCreate, HoldCreate, HoldList, HoldRead
from app.services import audit, panel_estimate
from app.services import cursor as cursors
from app.services.history import move_cut_off, product_history
from app.services.inputs import refuse_nul
from app.services.keys import Principal
from app.services.lifecycle import PanelEvent, PanelStatus, next_status
from app.store.tables import Hold, Lot, Measurement, Panel, PanelEstimate, Product, utcnow

HOLDING_LEVELS: Final = ("at_risk", "over_limit")
#: Rules a hold can carry: those of the holding levels, and a manual hold.
HOLD_RULES: Final = (*(rule for rule, level in RULES if level in HOLDING_LEVELS), "manual")
AUTOMATIC: Final = "stackledger (automatic)"


def _figures(state: PanelEstimate) -> dict[str, Any]:
    """The panel's figures kept with a hold and its audit entries, under the API's names
    (docs/glossary.md)."""
    forecast = state.forecast
    return {
        "ftb_current_um": state.ftb_worst_um,
        "p_final_over_limit": state.p_exceed,
        "ftb_final_forecast_um": forecast.final_worst_um if forecast else None,
        "ftb_final_band_um": {"low_um": forecast.band_um[0], "high_um": forecast.band_um[1]}
        if forecast else None,
        "l2l_worst_um": state.l2l_worst_um,
        "layers_reached": {"A": max(state.layers_a, default=0),
                           "B": max(state.layers_b, default=0)},
        "risk": state.risk,
    }


def _figure(figures: dict[str, Any], name: str, before_0008: str) -> float:
    """A kept figure; holds kept before migration 0008 name it as they did then (the audit
    trail is never rewritten)."""
    return float(figures.get(name, figures.get(before_0008)) or 0.0)


def _open_hold(session: Session, serial: str) -> Hold | None:
    return session.scalars(
        select(Hold).where(Hold.panel == serial, Hold.state == "open")
    ).first()


def _worse_than_release(session: Session, serial: str, rule: str, state: PanelEstimate) -> bool:
    """Whether the panel may be held again for ``rule`` after its last release for it."""
    released = session.scalars(
        select(Hold)
        .where(Hold.panel == serial, Hold.rule == rule, Hold.disposition == "release")
        .order_by(Hold.disposed_at.desc())
    ).first()
    if released is None:
        return True
    at_release = released.figures.get("at_release", released.figures)
    p_then = _figure(at_release, "p_final_over_limit", "p_exceed")
    ftb_then = _figure(at_release, "ftb_current_um", "ftb_worst_um")
    return (state.p_exceed or 0.0) > p_then or state.ftb_worst_um > ftb_then


def apply_automatic(
    session: Session, *, panel: Panel, state: PanelEstimate, assessment: RiskAssessment
) -> Hold | None:
    """Put the panel on hold if its new state calls for it; returns the new hold, if any."""
    if assessment.level not in HOLDING_LEVELS or panel.status == PanelStatus.SCRAPPED:
        return None
    if _open_hold(session, panel.serial) is not None:
        return None
    if not _worse_than_release(session, panel.serial, assessment.rule, state):
        return None
    hold = Hold(
        panel=panel.serial, id=uuid.uuid4(), state="open", kind="automatic",
        rule=assessment.rule, severity=severity(assessment.level),
        reason=" ".join(assessment.reasons), figures=_figures(state), held_at=utcnow(),
        held_by=AUTOMATIC,
    )
    session.add(hold)
    panel.status = next_status(panel.status, PanelEvent.HELD, all_layers_on=False)
    audit.record(session, actor=AUTOMATIC, action="hold", subject=panel.serial,
                 details={"hold": str(hold.id), "rule": hold.rule, **hold.figures})
    return hold


def _with_panel() -> Select[Any]:
    """Holds with what the hold list shows of their panel, in one query (no lookups per row)."""
    return (
        select(Hold, Lot.code, Product.code, Product.ftb_limit_um, PanelEstimate.risk,
               PanelEstimate.layers_a, PanelEstimate.layers_b, PanelEstimate.ftb_worst_um,
               PanelEstimate.forecast, PanelEstimate.p_exceed)
        .join(Panel, Panel.serial == Hold.panel)
        .join(Lot, Lot.id == Panel.lot_id)
        .join(Product, Product.id == Panel.product_id)
        .outerjoin(PanelEstimate, PanelEstimate.panel == Hold.panel)
    )


def _to_read(row: Row[Any]) -> HoldRead:
    hold, lot, product, ftb_limit, risk, layers_a, layers_b, ftb, forecast, p_exceed = row
    return HoldRead(
        id=str(hold.id), panel=hold.panel, lot=lot, product=product,
        state=hold.state, kind=hold.kind, rule=hold.rule, risk=risk or "clear",
        severity=hold.severity,
        layers_reached=LayersReached(A=max(layers_a or [], default=0),
                                     B=max(layers_b or [], default=0)),
        ftb_current_um=ftb or 0.0, ftb_limit_um=ftb_limit,
        ftb_final_forecast_um=forecast.final_worst_um if forecast else None,
        ftb_final_band_um=forecast.band_um if forecast else None,
        p_final_over_limit=p_exceed,
        reason=hold.reason, held_since=hold.held_at, held_by=hold.held_by,
        disposition=hold.disposition, disposition_note=hold.disposition_note,
        disposition_at=hold.disposed_at, disposition_by=hold.disposed_by,
        rework=hold.figures.get("rework") if hold.disposition == "rework" else None,
    )


def _read(session: Session, hold: Hold) -> HoldRead:
    return _to_read(session.execute(
        _with_panel().where(Hold.panel == hold.panel, Hold.id == hold.id)).one())


def place(*, db: Database, serial: str, data: HoldCreate, principal: Principal) -> HoldRead:
    """A manual hold by an engineer (or above)."""
    with db.transaction() as session:
        panel = session.get(Panel, serial, with_for_update=True)
        if panel is None:
            raise NotFound(f"no panel with serial '{serial}'")
        if panel.status == PanelStatus.SCRAPPED:
            raise Conflict(f"panel '{serial}' is scrapped; it cannot be held")
        if (existing := _open_hold(session, serial)) is not None:
            raise Conflict(f"panel '{serial}' already has an open hold ({existing.id})")
        state = session.get(PanelEstimate, serial)
        figures = _figures(state) if state else {}
        level = state.risk if state else "clear"
        hold = Hold(
            panel=serial, id=uuid.uuid4(), state="open", kind="manual", rule="manual",
            severity=max(severity(level), 1), reason=data.reason.strip(), figures=figures,
            held_at=utcnow(), held_by=principal.label,
        )
        session.add(hold)
        panel.status = next_status(panel.status, PanelEvent.HELD, all_layers_on=False,
                                   serial=serial)
        audit.record(session, actor=principal.label, action="hold", subject=serial,
                     details={"hold": str(hold.id), "rule": "manual", "reason": hold.reason,
                              **figures})
        session.flush()
        return _read(session, hold)


def _all_layers_on(session: Session, panel: Panel) -> bool:
    state = session.get(PanelEstimate, panel.serial)
    full = session.get_one(Product, panel.product_id).layers_per_side
    return state is not None and len(state.layers_a) == full and len(state.layers_b) == full


def _set_aside(session: Session, *, hold: Hold, side: str, layer: int) -> dict[str, Any]:
    """Supersede the measurement in force of ``layer`` and ``side`` by the rework ``hold``."""
    measurement = session.scalars(select(Measurement).where(
        Measurement.panel == hold.panel, Measurement.side == side, Measurement.layer == layer,
        Measurement.superseded_by.is_(None))).one_or_none()
    if measurement is None:
        raise InvalidInput(
            f"panel '{hold.panel}' has no measurement in force of layer {layer} side {side}; "
            "name a measured layer to rework", [FieldError(message="no measurement in force",
                                                           pointer="/layer")])
    measurement.superseded_by = hold.id
    return {"side": side, "layer": layer, "set_aside_measurement": str(measurement.id)}


def _recompute(db: Database, session: Session, panel: Panel) -> PanelEstimate:
    """The panel's estimate without the measurement a rework set aside (the layer counts as
    still to come). Setting a measurement aside changes what the product history learns, so
    its revision and cut-off move too (``app.services.history``)."""
    session.flush()
    product = session.get_one(Product, panel.product_id)
    stored = session.get(PanelEstimate, panel.serial)
    estimate = panel_estimate.compute(serial=panel.serial, product=product,
                             layers=panel_estimate.current_layers(session, panel.serial),
                             histories=product_history(db, session, product=product),
                             previous_level=stored.risk if stored else None)
    panel.revision += 1
    move_cut_off(session, [product.id])
    return panel_estimate.store(session, serial=panel.serial, estimate=estimate)


def dispose(
    *, db: Database, hold_id: str, data: DispositionCreate, principal: Principal
) -> HoldRead:
    """Close an open hold with release, scrap or rework (supervisor or admin)."""
    try:
        key = uuid.UUID(hold_id)
    except ValueError as exc:
        raise InvalidInput(f"'{hold_id}' is not a hold id") from exc
    with db.transaction() as session:
        hold = session.scalars(select(Hold).where(Hold.id == key)).one_or_none()
        if hold is None:
            raise NotFound(f"no hold with id '{hold_id}'")
        if hold.state != "open":
            raise Conflict(f"hold '{hold_id}' was already closed ({hold.disposition})")
        panel = session.get_one(Panel, hold.panel, with_for_update=True)
        session.refresh(hold)
        if hold.state != "open":
            raise Conflict(f"hold '{hold_id}' was closed meanwhile ({hold.disposition})")
        state = session.get(PanelEstimate, hold.panel)
        figures = _figures(state) if state else {}
        hold.state = "closed"
        hold.disposition = data.action
        hold.disposition_note = data.note.strip()
        hold.disposed_at = utcnow()
        hold.disposed_by = principal.label
        details: dict[str, Any] = {"hold": hold_id, "action": data.action, "note": data.note,
                                   **figures}
        event = {"release": PanelEvent.RELEASED, "scrap": PanelEvent.SCRAPPED,
                 "rework": PanelEvent.REWORKED}[data.action]
        if data.action == "release":
            hold.figures = {**hold.figures, "at_release": figures}
        elif data.action == "rework":
            assert data.side is not None and data.layer is not None  # DispositionCreate checks
            details["rework"] = _set_aside(session, hold=hold, side=data.side, layer=data.layer)
            hold.figures = {**hold.figures, "rework": details["rework"]}
        panel.status = next_status(panel.status, event,
                                   all_layers_on=_all_layers_on(session, panel),
                                   serial=panel.serial)
        if data.action == "rework":
            details["after_rework"] = _figures(_recompute(db, session, panel))
        audit.record(session, actor=principal.label, action=f"disposition_{data.action}",
                     subject=hold.panel, details=details)
        session.flush()
        return _read(session, hold)


def _cursor(hold: Hold) -> str:
    return cursors.encode([hold.severity, hold.held_at.isoformat(), hold.panel, str(hold.id)])


def _after(cursor: str) -> ColumnElement[bool]:
    """Keyset condition: holds that come after the cursor in the hold-list order."""
    severity, at, panel, key = cursors.decode(
        cursor, cursors.integer, cursors.instant, cursors.text, cursors.identifier)
    later = or_(Hold.held_at > at, and_(Hold.held_at == at, or_(
        Hold.panel > panel, and_(Hold.panel == panel, Hold.id > key))))
    return or_(Hold.severity < severity, and_(Hold.severity == severity, later))


def list_holds(
    *, db: Database, state: str | None = "open", limit: int = 50, cursor: str | None = None,
    product: str | None = None, lot: str | None = None, rule: str | None = None,
) -> HoldList:
    """One page of holds ordered by severity (worst first), then age (oldest first),
    optionally only those of one product, lot or rule."""
    if state not in (None, "open", "closed"):
        raise InvalidInput(f"state must be 'open' or 'closed', got '{state}'")
    refuse_nul(product=product, lot=lot, rule=rule)
    with db.reading() as session:
        query = _with_panel()
        if state:
            query = query.where(Hold.state == state)
        if product:
            query = query.where(Product.code == product)
        if lot:
            query = query.where(Lot.code == lot)
        if rule:
            query = query.where(Hold.rule == rule)
        if cursor:
            query = query.where(_after(cursor))
        rows = session.execute(
            query.order_by(Hold.severity.desc(), Hold.held_at, Hold.panel, Hold.id)
            .limit(limit + 1)
        ).all()
        more = len(rows) > limit
        return HoldList(holds=[_to_read(r) for r in rows[:limit]],
                        next_cursor=_cursor(rows[limit - 1][0]) if more else None)


def open_hold_id(*, db: Database, id_or_prefix: str) -> str:
    """The full id of the open hold whose id is, or starts with, ``id_or_prefix`` (the terminal
    table shows the first 8 characters); NotFound or Conflict when none or several match."""
    wanted = id_or_prefix.strip().lower()
    if len(wanted) < 4:
        raise InvalidInput("give at least the first 4 characters of the hold id")
    found = [h.id for h in list_all_holds(db=db, state="open").holds if h.id.startswith(wanted)]
    if not found:
        raise NotFound(f"no open hold has an id starting with '{id_or_prefix}'")
    if len(found) > 1:
        raise Conflict(f"{len(found)} open holds have ids starting with '{id_or_prefix}'; "
                       "give more characters")
    return found[0]


def list_all_holds(
    *, db: Database, state: str | None = "open", product: str | None = None,
    lot: str | None = None, rule: str | None = None,
) -> HoldList:
    """Every page, for the printed hold list and the CSV export."""
    page = list_holds(db=db, state=state, limit=500, product=product, lot=lot, rule=rule)
    items = list(page.holds)
    while page.next_cursor:
        page = list_holds(db=db, state=state, limit=500, cursor=page.next_cursor,
                          product=product, lot=lot, rule=rule)
        items += page.holds
    return HoldList(holds=items)


def for_panel(*, db: Database, serial: str) -> list[HoldRead]:
    """Every hold of one panel, the open one (if any) first, then newest first."""
    with db.reading() as session:
        rows = session.execute(
            _with_panel().where(Hold.panel == serial)
            .order_by((Hold.state == "open").desc(), Hold.held_at.desc())
        ).all()
        return [_to_read(r) for r in rows]


def get(*, db: Database, hold_id: str) -> HoldRead:
    """One hold by its id."""
    try:
        key = uuid.UUID(hold_id)
    except ValueError as exc:
        raise InvalidInput(f"'{hold_id}' is not a hold id") from exc
    with db.reading() as session:
        row = session.execute(_with_panel().where(Hold.id == key)).one_or_none()
        if row is None:
            raise NotFound(f"no hold with id '{hold_id}'")
        return _to_read(row)


def review_disposition(*, db: Database, hold_id: str, data: DispositionCreate) -> HoldRead:
    """Every check ``dispose`` makes, writing nothing: the form's review step."""
    hold = get(db=db, hold_id=hold_id)
    if hold.state != "open":
        raise Conflict(f"hold '{hold_id}' was already closed ({hold.disposition})")
    if data.action == "rework":
        with db.reading() as session:
            in_force = session.scalars(select(Measurement.id).where(
                Measurement.panel == hold.panel, Measurement.side == data.side,
                Measurement.layer == data.layer, Measurement.superseded_by.is_(None))).first()
        if in_force is None:
            raise InvalidInput(
                f"panel '{hold.panel}' has no measurement in force of layer {data.layer} side "
                f"{data.side}; name a measured layer to rework",
                [FieldError(message="no measurement in force", pointer="/layer")])
    return hold
