"""Product history for the forecast: what the product's panels did, layer by layer and side.

Learned (``app.overlay.layer_history.learn_history``) from the ``history_window_panels`` most
recently registered *complete* panels of the product (every layer measured, whatever their
status; they carry the layer-to-layer covariance and the exposure tools' effects), plus the
same number of panels still in process, whose measured layers (a panel that has layer k has
completed it) give the product's own L2L capability and persistence for the new-product prior.
A panel in process is never in the complete set, and the forecast leaves the panel's own
layers out of the capability (``ProductHistory.cov_without``), so a panel never forecasts
itself.

Learning the history reads a few thousand fits, so it is kept per product for
``HISTORY_MAX_AGE_S`` seconds inside the process; an import batch learns it once per product.
"""

from __future__ import annotations

import math
import time
from typing import Final

import numpy as np
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from app.config import get_settings
from app.overlay.layer_history import ProductHistory, learn_history, limit_variance
from app.store.tables import Fit, Measurement, Panel, Product

HISTORY_MAX_AGE_S: Final = 60.0
_cache: dict[tuple[int, int], tuple[float, ProductHistory]] = {}


def limit_var(product: Product) -> np.ndarray:
    """Per-layer component variance implied by the product's L2L limit (the prior's fallback)."""
    half_diagonal = 0.5 * math.hypot(product.panel_width_mm, product.panel_height_mm)
    return limit_variance(product.l2l_limit_um, half_diagonal,
                          trapezoid=product.model_terms == 8)


def _window(session: Session, product: Product, complete: bool, size: int) -> list[str]:
    # Complete by its layers, whatever the panel's status: panels on hold or scrapped are part
    # of what the process did (leaving held panels out would hide the drifting ones).
    counts = (
        select(Measurement.panel, func.count().label("n"))
        .join(Panel, Panel.serial == Measurement.panel)
        .where(Panel.product_id == product.id, Measurement.superseded_by.is_(None))
        .group_by(Measurement.panel)
        .subquery()
    )
    full = 2 * product.layers_per_side
    n = func.coalesce(counts.c.n, 0)
    return list(session.scalars(
        select(Panel.serial)
        .outerjoin(counts, counts.c.panel == Panel.serial)
        .where(Panel.product_id == product.id, n == full if complete else n < full)
        .order_by(Panel.created_at.desc(), Panel.serial.desc())
        .limit(size)
    ).all())


def learn(session: Session, *, product: Product) -> ProductHistory:
    """Learn the product's history from its recent complete and in-process panels."""
    window = get_settings().history_window_panels
    serials = (_window(session, product, True, window)
               + _window(session, product, False, window))
    n_layers = product.layers_per_side
    index = {s: i for i, s in enumerate(serials)}
    terms = np.zeros((len(serials), 2, n_layers, 8))
    present = np.zeros((len(serials), 2, n_layers), dtype=bool)
    tools = np.full((len(serials), 2, n_layers), -1, dtype=np.int64)
    names: dict[str, int] = {}
    for start in range(0, len(serials), 500):
        rows = session.execute(
            select(
                Measurement.panel, Measurement.side, Measurement.layer, Measurement.tool,
                Fit.tx, Fit.ty, Fit.sx, Fit.sy, Fit.ox, Fit.oy, Fit.kx, Fit.ky,
            )
            .join(Fit, (Fit.panel == Measurement.panel) & (Fit.measurement_id == Measurement.id))
            .where(Measurement.panel.in_(serials[start:start + 500]),
                   Measurement.superseded_by.is_(None))
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


def product_history(session: Session, *, product: Product) -> ProductHistory:
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
