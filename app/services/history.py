"""Product history for the forecast: what the product's panels did, layer by layer and side.

Learned (``app.overlay.layer_history.learn_history``) from the ``history_window_panels`` most
recently registered *complete* panels of the product (every layer measured, whatever their
status; they carry the layer-to-layer covariance and the exposure tools' effects), plus the
same number of panels still in process, whose measured layers (a panel that has layer k has
completed it) give the product's own L2L capability and persistence for the new-product prior.
A panel in process is never in the complete set, and the forecast leaves the panel's own
layers out of the capability (``ProductHistory.cov_without``), so a panel never forecasts
itself.

Learning reads a few thousand fits, so the result is kept in ``db.history`` (a
``RevisionCache``) under the product's ``history_revision``. Each revision has a cut-off,
``products.history_at``, and learning reads only what was received by then, so the history is a
function of the revision alone: every process, the API and the import alike, learns the same one.
The pipeline moves revision and cut-off, in the same transaction, when a panel completes its
stack, when a measurement is replaced, and when the cut-off is older than
``history_refresh_s`` (default 300 s); every process then learns again on its next use.
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from datetime import datetime

import numpy as np
from sqlalchemy import func, select, update
from sqlalchemy.orm import Session

from app.config import get_settings
from app.db import Database
from app.overlay.layer_history import ProductHistory, learn_history, limit_variance
from app.store.tables import Fit, Measurement, Panel, Product, utcnow


def limit_var(product: Product) -> np.ndarray:
    """Per-layer component variance implied by the product's L2L limit (the prior's fallback)."""
    half_diagonal = 0.5 * math.hypot(product.panel_width_mm, product.panel_height_mm)
    return limit_variance(product.l2l_limit_um, half_diagonal,
                          trapezoid=product.model_terms == 8)


def _window(session: Session, product: Product, as_of: datetime, complete: bool,
            size: int) -> list[str]:
    # Complete by its layers, whatever the panel's status: panels on hold or scrapped are part
    # of what the process did (leaving held panels out would hide the drifting ones).
    counts = (
        select(Measurement.panel, func.count().label("n"))
        .join(Panel, Panel.serial == Measurement.panel)
        .where(Panel.product_id == product.id, Measurement.superseded_by.is_(None),
               Measurement.received_at <= as_of)
        .group_by(Measurement.panel)
        .subquery()
    )
    full = 2 * product.layers_per_side
    n = func.coalesce(counts.c.n, 0)
    return list(session.scalars(
        select(Panel.serial)
        .outerjoin(counts, counts.c.panel == Panel.serial)
        .where(Panel.product_id == product.id, Panel.created_at <= as_of,
               n == full if complete else (n < full) & (n > 0))
        .order_by(Panel.created_at.desc(), Panel.serial.desc())
        .limit(size)
    ).all())


def learn(session: Session, *, product: Product) -> ProductHistory:
    """Learn the product's history as of its cut-off, from its recent complete and in-process
    panels."""
    window = get_settings().history_window_panels
    as_of = product.history_at
    serials = [] if as_of is None else (_window(session, product, as_of, True, window)
                                        + _window(session, product, as_of, False, window))
    n_layers = product.layers_per_side
    index = {s: i for i, s in enumerate(serials)}
    terms = np.zeros((len(serials), 2, n_layers, 8))
    present = np.zeros((len(serials), 2, n_layers), dtype=bool)
    tools = np.full((len(serials), 2, n_layers), -1, dtype=np.int64)
    names: dict[str, int] = {}
    for start in range(0, len(serials), 500):
        rows = session.execute(
            select(
                Measurement.panel, Measurement.side, Measurement.layer, Measurement.exposure_tool,
                Fit.tx, Fit.ty, Fit.sx, Fit.sy, Fit.ox, Fit.oy, Fit.kx, Fit.ky,
            )
            .join(Fit, (Fit.panel == Measurement.panel) & (Fit.measurement_id == Measurement.id))
            .where(Measurement.panel.in_(serials[start:start + 500]),
                   Measurement.superseded_by.is_(None), Measurement.received_at <= as_of)
        ).all()
        for serial, side, layer, tool, *values in rows:
            s = 0 if side == "A" else 1
            i = index[serial]
            terms[i, s, layer - 1] = values
            present[i, s, layer - 1] = True
            tools[i, s, layer - 1] = names.setdefault(tool, len(names))
    return learn_history(
        terms, present, tools, tuple(names), panel_ids=tuple(serials),
        flip_axis=product.flip_axis, limit_var=limit_var(product),
    )


def move_cut_off(session: Session, product_ids: Iterable[int],
                 at: datetime | None = None) -> None:
    """A new history revision with its cut-off at ``at`` (now), in the caller's transaction:
    what the product history learns has changed (see the module docstring)."""
    ids = sorted(set(product_ids))
    if ids:
        session.execute(update(Product).where(Product.id.in_(ids)).values(
            history_revision=Product.history_revision + 1, history_at=at or utcnow()))


def product_history(db: Database, session: Session, *, product: Product) -> ProductHistory:
    """The product's history at its current ``history_revision``, learned once per revision."""
    return db.history.get(product.id, product.history_revision,  # type: ignore[no-any-return]
                          lambda: learn(session, product=product))
