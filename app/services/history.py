"""Product history for the forecast: per side and layer, what completed panels of the product
did.

The window is the ``history_window_panels`` panels of the product that most recently completed
their stack (every layer of both sides in force; ``panels.completed_at``), so a panel still in
process, the one being forecast included, never feeds the history it is judged by. The core
decides per layer whether there is enough history (see
``app.overlay.forecast.history_from_panels``) and falls back to the limit-based prior otherwise.

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

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session

from app.config import get_settings
from app.db import Database
from app.overlay.forecast import LayerHistory, history_from_panels, prior_history
from app.store.tables import Fit, Measurement, Panel, Product

Histories = tuple[LayerHistory, LayerHistory]


def prior(product: Product) -> LayerHistory:
    half_diagonal = 0.5 * math.hypot(product.panel_width_mm, product.panel_height_mm)
    return prior_history(
        product.layers_per_side, product.l2l_limit_um, panel_half_diagonal_mm=half_diagonal
    )


def learn(session: Session, *, product: Product) -> tuple[LayerHistory, LayerHistory]:
    """Learn side A's and side B's layer history from the product's recently completed panels."""
    window = get_settings().history_window_panels
    as_of = product.history_at
    serials = [] if as_of is None else session.scalars(
        select(Panel.serial)
        .where(Panel.product_id == product.id, Panel.completed_at.is_not(None),
               Panel.completed_at <= as_of)
        .order_by(Panel.completed_at.desc(), Panel.serial.desc())
        .limit(window)
    ).all()
    fallback = prior(product)
    n_layers = product.layers_per_side
    if not serials:
        return fallback, fallback
    index = {s: i for i, s in enumerate(serials)}
    terms = np.zeros((2, len(serials), n_layers, 8))
    present = np.zeros((2, len(serials), n_layers), dtype=bool)
    rows = session.execute(
        select(
            Measurement.panel, Measurement.side, Measurement.layer,
            Fit.tx, Fit.ty, Fit.sx, Fit.sy, Fit.ox, Fit.oy, Fit.kx, Fit.ky,
        )
        .join(Fit, (Fit.panel == Measurement.panel) & (Fit.measurement_id == Measurement.id))
        .where(Measurement.panel.in_(serials), Measurement.superseded_by.is_(None),
               Measurement.received_at <= as_of)
    ).all()
    for serial, side, layer, *values in rows:
        s = 0 if side == "A" else 1
        terms[s, index[serial], layer - 1] = values
        present[s, index[serial], layer - 1] = True
    return (
        history_from_panels(terms[0], present[0], fallback=fallback),
        history_from_panels(terms[1], present[1], fallback=fallback),
    )


def product_history(db: Database, session: Session, *, product: Product) -> Histories:
    """The product's history at its current ``history_revision``, learned once per revision."""
    return db.history.get(product.id, product.history_revision,  # type: ignore[no-any-return]
                          lambda: learn(session, product=product))
