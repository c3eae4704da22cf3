"""Product history for the forecast: per side and layer, what recent panels of the product did.

The window is the ``history_window_panels`` most recently registered panels of the product
(default 200). The core decides per layer whether there is enough history (see
``app.overlay.forecast.history_from_panels``) and falls back to the limit-based prior otherwise.

Learning the history reads a few thousand fits, so it is kept per product for
``HISTORY_MAX_AGE_S`` seconds inside the process; an import batch learns it once per product.
"""

from __future__ import annotations

import math
import time
from typing import Final

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session

from app.config import get_settings
from app.overlay.forecast import LayerHistory, history_from_panels, prior_history
from app.store.tables import Fit, Measurement, Panel, Product

HISTORY_MAX_AGE_S: Final = 60.0
_cache: dict[tuple[int, int], tuple[float, tuple[LayerHistory, LayerHistory]]] = {}


def prior(product: Product) -> LayerHistory:
    half_diagonal = 0.5 * math.hypot(product.panel_width_mm, product.panel_height_mm)
    return prior_history(
        product.layers_per_side, product.l2l_limit_um, panel_half_diagonal_mm=half_diagonal
    )


def learn(session: Session, *, product: Product) -> tuple[LayerHistory, LayerHistory]:
    """Learn side A's and side B's layer history from the product's recent panels."""
    window = get_settings().history_window_panels
    serials = session.scalars(
        select(Panel.serial)
        .where(Panel.product_id == product.id)
        .order_by(Panel.created_at.desc(), Panel.serial.desc())
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
        .where(Measurement.panel.in_(serials), Measurement.superseded_by.is_(None))
    ).all()
    for serial, side, layer, *values in rows:
        s = 0 if side == "A" else 1
        terms[s, index[serial], layer - 1] = values
        present[s, index[serial], layer - 1] = True
    return (
        history_from_panels(terms[0], present[0], fallback=fallback),
        history_from_panels(terms[1], present[1], fallback=fallback),
    )


def product_history(session: Session, *, product: Product) -> tuple[LayerHistory, LayerHistory]:
    """The cached history of a product, learned again when older than HISTORY_MAX_AGE_S."""
    key = (id(session.get_bind()), product.id)
    hit = _cache.get(key)
    now = time.monotonic()
    if hit is not None and now - hit[0] < HISTORY_MAX_AGE_S:
        return hit[1]
    histories = learn(session, product=product)
    _cache[key] = (now, histories)
    return histories


def forget() -> None:
    """Drop every cached history (tests, and after bulk changes)."""
    _cache.clear()
