"""Holds and disposition.

- Automatic hold: when a panel's risk enters at_risk or over_limit and it has no open hold. The
  rule and the figures of that moment are kept with the hold.
- A released panel is not held again for the same rule unless its p_exceed or its current FTB
  has become worse than at release.
- Manual hold: an engineer, with a reason.
- Disposition (supervisor): release, scrap, or rework of the last layer (its re-measurement then
  supersedes the old one through the normal upload). A note is required; every change is in the
  audit log with who, when, what and the figures.

The tool supports these decisions; they rest with the fab's own quality procedures and
qualified engineers (``app.schemas.holds.CAUTION``).
"""

from __future__ import annotations

import uuid
from typing import Any, Final

from sqlalchemy import ColumnElement, Row, Select, and_, or_, select
from sqlalchemy.orm import Session

from app.db import Database
from app.errors import Conflict, InvalidInput, NotFound
from app.overlay.risk import RiskAssessment, severity
from app.schemas.holds import DispositionCreate, HoldCreate, HoldList, HoldRead
from app.services import audit
from app.services import cursor as cursors
from app.services.inputs import refuse_nul
from app.services.keys import Principal
from app.services.lifecycle import PanelEvent, PanelStatus, next_status
from app.store.tables import Hold, Lot, Panel, PanelState, Product, utcnow

HOLDING_LEVELS: Final = ("at_risk", "over_limit")
AUTOMATIC: Final = "stackledger (automatic)"


def _figures(state: PanelState) -> dict[str, Any]:
    forecast = state.forecast
    return {
        "ftb_worst_um": state.ftb_worst_um,
        "p_exceed": state.p_exceed,
        "final_worst_um": forecast.final_worst_um if forecast else None,
        "band_um": list(forecast.band_um) if forecast else None,
        "l2l_worst_um": state.l2l_worst_um,
        "layers": {"A": max(state.layers_a, default=0), "B": max(state.layers_b, default=0)},
        "risk": state.risk,
    }


def _open_hold(session: Session, serial: str) -> Hold | None:
    return session.scalars(
        select(Hold).where(Hold.panel == serial, Hold.state == "open")
    ).first()


def _worse_than_release(session: Session, serial: str, rule: str, state: PanelState) -> bool:
    """Whether the panel may be held again for ``rule`` after its last release for it."""
    released = session.scalars(
        select(Hold)
        .where(Hold.panel == serial, Hold.rule == rule, Hold.disposition == "release")
        .order_by(Hold.disposed_at.desc())
    ).first()
    if released is None:
        return True
    at_release = released.figures.get("at_release", released.figures)
    p_then = at_release.get("p_exceed") or 0.0
    ftb_then = at_release.get("ftb_worst_um") or 0.0
    return (state.p_exceed or 0.0) > p_then or state.ftb_worst_um > ftb_then


def apply_automatic(
    session: Session, *, panel: Panel, state: PanelState, assessment: RiskAssessment
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
        select(Hold, Lot.code, Product.code, Product.ftb_limit_um, PanelState.risk,
               PanelState.layers_a, PanelState.layers_b, PanelState.ftb_worst_um,
               PanelState.forecast, PanelState.p_exceed)
        .join(Panel, Panel.serial == Hold.panel)
        .join(Lot, Lot.id == Panel.lot_id)
        .join(Product, Product.id == Panel.product_id)
        .outerjoin(PanelState, PanelState.panel == Hold.panel)
    )


def _to_read(row: Row[Any]) -> HoldRead:
    hold, lot, product, ftb_limit, risk, layers_a, layers_b, ftb, forecast, p_exceed = row
    return HoldRead(
        id=str(hold.id), panel=hold.panel, lot=lot, product=product,
        state=hold.state, kind=hold.kind, rule=hold.rule, risk=risk or "clear",
        severity=hold.severity,
        layers_reached={"A": max(layers_a or [], default=0), "B": max(layers_b or [], default=0)},
        ftb_now_um=ftb or 0.0, ftb_limit_um=ftb_limit,
        forecast_final_um=forecast.final_worst_um if forecast else None,
        forecast_band_um=forecast.band_um if forecast else None,
        p_exceed=p_exceed,
        reason=hold.reason, held_since=hold.held_at, held_by=hold.held_by,
        disposition=hold.disposition, disposition_note=hold.disposition_note,
        disposed_at=hold.disposed_at, disposed_by=hold.disposed_by,
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
        state = session.get(PanelState, serial)
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
    state = session.get(PanelState, panel.serial)
    full = session.get_one(Product, panel.product_id).layers_per_side
    return state is not None and len(state.layers_a) == full and len(state.layers_b) == full


def _last_layer(state: PanelState | None) -> dict[str, int]:
    if state is None:
        return {}
    a, b = max(state.layers_a, default=0), max(state.layers_b, default=0)
    # The last layer built is the higher one; at a balanced pair, side B follows side A.
    return {"side": "B", "layer": b} if b >= a and b else {"side": "A", "layer": a}


def _rework_target(session: Session, panel: Panel, state: PanelState | None,
                   data: DispositionCreate) -> dict[str, Any]:
    """The side and layer to redo: as named, else the last layer built."""
    if data.rework_side is None and data.rework_layer is None:
        return _last_layer(state)
    if data.rework_side is None or data.rework_layer is None:
        raise InvalidInput("a rework names both the side and the layer, or neither")
    full = session.get_one(Product, panel.product_id).layers_per_side
    if data.rework_layer > full:
        raise InvalidInput(f"rework_layer {data.rework_layer} is beyond the product's "
                           f"{full} layers a side")
    return {"side": data.rework_side, "layer": data.rework_layer}


def dispose(
    *, db: Database, hold_id: str, data: DispositionCreate, principal: Principal
) -> HoldRead:
    """Close an open hold with release, scrap or rework (supervisor or admin)."""
    try:
        key = uuid.UUID(hold_id)
    except ValueError as exc:
        raise InvalidInput(f"'{hold_id}' is not a hold id") from exc
    if data.action != "rework" and (data.rework_side or data.rework_layer):
        raise InvalidInput("rework_side and rework_layer go with a rework only")
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
        state = session.get(PanelState, hold.panel)
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
            details["rework"] = _rework_target(session, panel, state, data)
            hold.figures = {**hold.figures, "rework": details["rework"]}
        panel.status = next_status(panel.status, event,
                                   all_layers_on=_all_layers_on(session, panel),
                                   serial=panel.serial)
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
    if data.action != "rework" and (data.rework_side or data.rework_layer):
        raise InvalidInput("rework_side and rework_layer go with a rework only")
    if data.action == "rework":
        with db.reading() as session:
            panel = session.get_one(Panel, hold.panel)
            _rework_target(session, panel, session.get(PanelState, hold.panel), data)
    return hold
