"""The measurement pipeline: one path for a POST (a batch of one) and a CSV file (a batch of
thousands).

    prepare (read transaction, no lock):  panels -> checks -> mirror side B -> fit
                                          -> fits in force + the batch's -> estimates
    write   (write transaction, short):   lock the batch's panels -> anything changed since
                                          prepare is recomputed under the lock -> supersede
                                          -> measurements, site packs, fits, estimates, status,
                                          history revision, automatic holds

Everything costly (parsing, checks, fits, forecasts) happens before the write transaction, so
SQLite's write lock and PostgreSQL's panel row locks are held only for the final writes. A write
prepared outside the lock is still correct under concurrency: each panel carries a ``revision``
that every write bumps; under the lock, a panel whose revision moved since prepare has its fits
in force read again and its estimate computed again (the same functions), so no estimate is ever
built from stale fits. A batch is all or nothing.
"""

from __future__ import annotations

import uuid
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from typing import Any, TypeVar

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session

from app.config import get_settings
from app.db import Database
from app.errors import FieldError, InvalidInput
from app.overlay.fit import OverlayFit, fit_many, reach_of
from app.overlay.frames import mirror_sites
from app.overlay.layer_history import ProductHistory
from app.schemas.text import control_problem
from app.services import checks, holds, panel_estimate
from app.services.batch import GENEALOGY, MeasurementBatch
from app.services.checks import PanelFacts
from app.services.history import move_cut_off, product_history
from app.services.lifecycle import PanelEvent, PanelStatus, next_status
from app.services.products import check_points
from app.store import bulk, sitepack
from app.store.tables import Fit, Measurement, Panel, PanelEstimate, Product, SiteSet, utcnow

T = TypeVar("T")
LayerKey = tuple[str, str, int]  # panel, side, layer


@dataclass
class Plan:
    """A batch checked, fitted and estimated, ready to write."""

    batch: MeasurementBatch
    products: list[Product]
    times: list[datetime]
    panel_sites: np.ndarray  # (N, 4): x, y, dx, dy in the panel frame
    fits: list[OverlayFit]
    ids: list[uuid.UUID]
    revisions: dict[str, int]
    completed: dict[str, bool]
    in_force: dict[LayerKey, uuid.UUID]
    histories: dict[int, ProductHistory]
    #: Each panel's stored level before the batch (the levels' hysteresis starts from it).
    levels: dict[str, str | None] = field(default_factory=dict)
    estimates: dict[str, panel_estimate.Estimate] = field(default_factory=dict)


@dataclass
class Outcome:
    """What a write stored."""

    ids: list[uuid.UUID]
    superseded: list[uuid.UUID | None]
    received_at: datetime
    panels: dict[str, Panel]


def _facts(session: Session, serials: Iterable[str]
           ) -> tuple[dict[str, PanelFacts | None], dict[str, int], dict[str, bool]]:
    # A serial with a control character is never looked up (PostgreSQL refuses NUL in a
    # query); the catalogue reports it.
    wanted = sorted(s for s in set(serials) if control_problem(s) is None)
    facts: dict[str, PanelFacts | None] = dict.fromkeys(wanted)
    revisions: dict[str, int] = {}
    completed: dict[str, bool] = {}
    for start in range(0, len(wanted), 500):
        rows = session.execute(
            select(Panel.serial, Panel.status, Panel.revision, Panel.completed_at, Product,
                   PanelEstimate.risk)
            .join(Product, Product.id == Panel.product_id)
            .outerjoin(PanelEstimate, PanelEstimate.panel == Panel.serial)
            .where(Panel.serial.in_(wanted[start:start + 500]))
        ).all()
        for serial, status, revision, completed_at, product, risk in rows:
            facts[serial] = PanelFacts(status=status, product=product, risk=risk)
            revisions[serial] = revision
            completed[serial] = completed_at is not None
    return facts, revisions, completed


def _in_force(layers: dict[str, panel_estimate.Layers]) -> dict[LayerKey, uuid.UUID]:
    """The measurement in force for each panel, side and layer."""
    return {(serial, side, k): fit.measurement_id
            for serial, sides in layers.items() for side, by_layer in sides.items()
            for k, fit in by_layer.items()}


def _to_panel_frame(batch: MeasurementBatch, products: list[Product]) -> np.ndarray:
    """Side B posted in its facing-side frame goes to the panel frame: one mirror call per flip
    axis."""
    sites = np.column_stack((batch.x, batch.y, batch.dx, batch.dy))
    in_side_frame_b = np.array([s == "B" and f == "facing_side" for s, f in
                          zip(batch.side, batch.frame, strict=True)], dtype=bool)
    flips = np.array([p.flip_axis for p in products])
    for axis in ("x", "y"):
        rows = np.repeat(in_side_frame_b & (flips == axis), batch.counts)
        if rows.any():
            sites[rows] = np.column_stack(mirror_sites(
                *(sites[rows, c] for c in range(4)), side="B", flip_axis=axis))
    return sites


def _fit(sites: np.ndarray, counts: np.ndarray, products: list[Product]) -> list[OverlayFit]:
    """Fits of every measurement, vectorised over those that share a model; each fit is guarded
    over the reach of its product's check points (``app.overlay.fit``)."""
    trapezoid = np.array([p.model_terms == 8 for p in products], dtype=bool)
    reaches = {p.id: reach_of(check_points(p)) for p in {p.id: p for p in products}.values()}
    starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
    fits: list[Any] = [None] * len(counts)
    for flag in (False, True):
        idx = np.flatnonzero(trapezoid == flag)
        if not len(idx):
            continue
        rows = np.concatenate([np.arange(starts[i], starts[i] + counts[i]) for i in idx])
        part = sites[rows]
        reach = np.array([reaches[products[i].id] for i in idx])
        for i, f in zip(idx, fit_many(part[:, 0], part[:, 1], part[:, 2], part[:, 3],
                                      counts[idx], trapezoid=flag, reach_mm=reach), strict=True):
            fits[i] = f
    return fits


def _estimate(plan: Plan, serials: Iterable[str], layers: dict[str, panel_estimate.Layers]) -> None:
    """Estimates of ``serials`` from their fits in force (``layers``) plus the batch's own."""
    batch = plan.batch
    wanted = set(serials)
    for j, serial in enumerate(batch.panel):
        if serial in wanted:
            fit = plan.fits[j]
            layers[serial][batch.side[j]][int(batch.layer[j])] = panel_estimate.CurrentLayer(
                measurement_id=plan.ids[j],
                exposure_tool=batch.exposure_tool[j],
                measured_at=plan.times[j],
                model=fit.model,
                note=fit.note,
                terms=np.asarray(fit.terms, dtype=np.float64),
                sigma_um=(float(fit.sigma_um[0]), float(fit.sigma_um[1])),
                leverage=float(fit.leverage),
            )
    first = {s: j for j, s in reversed(list(enumerate(batch.panel)))}
    for serial in wanted:
        product = plan.products[first[serial]]
        plan.estimates[serial] = panel_estimate.compute(
            serial=serial, product=product, layers=layers[serial],
            histories=plan.histories[product.id], previous_level=plan.levels.get(serial))


def prepare(
    db: Database,
    batch: MeasurementBatch,
    *,
    describe: Callable[[list[FieldError]], str],
    reader_errors: list[FieldError] | None = None,
    usable: np.ndarray | None = None,
) -> Plan:
    """Check, fit and estimate a batch; raises InvalidInput (422) with every problem, located,
    when anything is wrong (``reader_errors`` are those the reader found; ``usable`` marks the
    measurements it could read), so that nothing of the batch is stored."""
    with db.reading() as session:
        facts, revisions, completed = _facts(session, batch.panel)
        errors = list(reader_errors or []) + checks.problems(batch, facts, usable)
        if errors:
            errors.sort(key=lambda e: (e.line or 0))
            raise InvalidInput(describe(errors), errors[:checks.MAX_REPORTED])
        products = [facts[p].product for p in batch.panel]  # type: ignore[union-attr]
        serials = sorted(set(batch.panel))
        layers = panel_estimate.current_layers_many(session, serials)
        histories = {p.id: product_history(db, session, product=p)
                     for p in {p.id: p for p in products}.values()}
        in_force = _in_force(layers)
    sites = _to_panel_frame(batch, products)
    plan = Plan(
        batch=batch, products=products,
        times=[t for t in batch.times if t is not None],
        panel_sites=sites, fits=_fit(sites, batch.counts, products),
        ids=[uuid.uuid4() for _ in range(len(batch))], revisions=revisions,
        completed=completed, in_force=in_force, histories=histories,
        levels={s: f.risk for s, f in facts.items() if f is not None},
    )
    _estimate(plan, serials, layers)
    return plan


def _fit_row(serial: str, measurement_id: uuid.UUID, fit: OverlayFit) -> dict[str, Any]:
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


def _rows(table: Any, rows: Iterable[dict[str, Any]]) -> list[tuple[Any, ...]]:
    columns = [c.name for c in table.columns]
    return [tuple(r.get(c) for c in columns) for r in rows]


def _lock(session: Session, plan: Plan) -> dict[str, Panel]:
    """The batch's panels, row-locked in serial order (no deadlock between two batches)."""
    serials = sorted(set(plan.batch.panel))
    locked: dict[str, Panel] = {}
    for start in range(0, len(serials), 500):
        for p in session.scalars(select(Panel).where(Panel.serial.in_(serials[start:start + 500]))
                                 .order_by(Panel.serial).with_for_update()):
            locked[p.serial] = p
    moved = [s for s in serials if locked[s].revision != plan.revisions[s]]
    if moved:
        scrapped = [s for s in moved if locked[s].status == PanelStatus.SCRAPPED]
        if scrapped:
            raise InvalidInput(f"panel '{scrapped[0]}' was scrapped while the upload was being "
                               "checked; no further measurements are accepted for it")
        # Another write reached these panels after prepare: read their fits again, here,
        # under the lock, and compute their estimates again.
        layers = panel_estimate.current_layers_many(session, moved)
        plan.in_force.update(_in_force(layers))
        for s in moved:
            plan.completed[s] = locked[s].completed_at is not None
        plan.levels.update((serial, risk) for serial, risk in session.execute(
            select(PanelEstimate.panel, PanelEstimate.risk).where(PanelEstimate.panel.in_(moved))))
        _estimate(plan, moved, layers)
    return locked


def write(
    db: Database,
    plan: Plan,
    *,
    source: str,
    key_label: str,
    first: Callable[[Session], T | None] | None = None,
    answer: Callable[[Session, Outcome], T] | None = None,
) -> T | Outcome:
    """Store a prepared batch in one short transaction.

    ``first(session)`` runs first inside the transaction (an Idempotency-Key claim); when it
    returns a value, nothing is written and that value is the result. ``answer(session,
    outcome)`` builds the caller's answer inside the transaction.
    """
    batch = plan.batch
    with db.transaction() as session:
        if first is not None and (early := first(session)) is not None:
            return early
        panels = _lock(session, plan)
        received = utcnow()
        position: dict[uuid.UUID, int] = {}
        superseded: list[uuid.UUID | None] = [None] * len(batch)
        superseded_by: list[uuid.UUID | None] = [None] * len(batch)
        updates: list[tuple[uuid.UUID, str, uuid.UUID]] = []
        for j, serial in enumerate(batch.panel):
            key = (serial, batch.side[j], int(batch.layer[j]))
            old = plan.in_force.get(key)
            superseded[j] = old
            if old is not None:
                if old in position:
                    superseded_by[position[old]] = plan.ids[j]
                else:
                    updates.append((plan.ids[j], serial, old))
            plan.in_force[key] = plan.ids[j]
            position[plan.ids[j]] = j
        genealogy = batch.genealogy_rows()
        bulk.insert(session, Measurement.__table__, _rows(Measurement.__table__, (
            {"panel": serial, "id": plan.ids[j], "layer": int(batch.layer[j]),
             "side": batch.side[j], "frame": batch.frame[j],
             "exposure_tool": batch.exposure_tool[j],
             "measured_at": plan.times[j], "received_at": received,
             "n_sites": int(batch.counts[j]), "superseded_by": superseded_by[j],
             "source": source, "key_label": key_label, **genealogy[j]}
            for j, serial in enumerate(batch.panel))))
        if updates:
            bulk.supersede(session, updates)
        posted = np.column_stack((batch.x, batch.y, batch.dx, batch.dy))
        bulk.insert(session, SiteSet.__table__, zip(
            batch.panel, plan.ids, batch.counts.tolist(),
            sitepack.pack_many(posted, batch.counts),
            sitepack.pack_many(plan.panel_sites, batch.counts), strict=True))
        bulk.insert(session, Fit.__table__, _rows(Fit.__table__, (
            _fit_row(serial, plan.ids[j], plan.fits[j]) for j, serial in enumerate(batch.panel))))
        replaced = {serial for serial, old in zip(batch.panel, superseded, strict=True)
                    if old is not None}
        _store_estimates(session, plan, panels, replaced)
        return answer(session, Outcome(ids=plan.ids, superseded=superseded,
                                       received_at=received, panels=panels)) \
            if answer is not None else Outcome(ids=plan.ids, superseded=superseded,
                                               received_at=received, panels=panels)


def _store_estimates(session: Session, plan: Plan, panels: dict[str, Panel],
                     replaced: set[str]) -> None:
    """Store the estimates, move each panel's status and revision, hold what must be held, and
    refresh the history cut-off of products whose learned history changed: a panel completed
    its stack, a measurement was replaced, or the cut-off is older than history_refresh_s."""
    serials = sorted(panels)
    states = {st.panel: st for start in range(0, len(serials), 500) for st in session.scalars(
        select(PanelEstimate).where(PanelEstimate.panel.in_(serials[start:start + 500])))}
    history_changed: set[int] = set()
    now = utcnow()
    refresh = timedelta(seconds=get_settings().history_refresh_s)
    for product in plan.products:
        if product.history_at is None or now - product.history_at > refresh:
            history_changed.add(product.id)
    with session.no_autoflush:
        for serial in serials:
            panel, estimate = panels[serial], plan.estimates[serial]
            st = panel_estimate.store(session, serial=serial, estimate=estimate,
                             existing=states.get(serial))
            panel.revision += 1
            panel.status = next_status(panel.status, PanelEvent.MEASURED,
                                       all_layers_on=estimate.all_layers_on, serial=serial)
            if plan.completed.get(serial) or estimate.all_layers_on or serial in replaced:
                # What the product history learns changed (app.services.history).
                history_changed.add(panel.product_id)
                if panel.completed_at is None:
                    panel.completed_at = now
            holds.apply_automatic(session, panel=panel, state=st,
                                  assessment=estimate.assessment)
    move_cut_off(session, history_changed, at=now)


__all__ = ["GENEALOGY", "Outcome", "Plan", "prepare", "write"]
