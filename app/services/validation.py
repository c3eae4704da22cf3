"""Checks that one posted measurement must pass before anything is stored; each failure says
where (a JSON pointer) and what. The CSV import makes the same checks vectorised over a chunk
(``app.services.imports``); the catalogues in tests/api/test_bad_input.py and test_imports.py
hold both to the same list."""

from __future__ import annotations

from collections.abc import Callable

import numpy as np

from app.config import get_settings
from app.errors import FieldError
from app.store.tables import Product


def check_measurement(
    *,
    product: Product,
    layer: int,
    side: str,
    frame: str,
    x: np.ndarray,
    y: np.ndarray,
    dx: np.ndarray,
    dy: np.ndarray,
    locate: Callable[[str, str, int | None], FieldError],
) -> list[FieldError]:
    """All the problems with one measurement; empty when it can be accepted.

    ``locate(field, message, site_index)`` turns a problem into a located FieldError.
    """
    settings = get_settings()
    errors: list[FieldError] = []
    if not 1 <= layer <= product.layers_per_side:
        errors.append(locate("layer", f"layer must be 1..{product.layers_per_side} for product "
                              f"'{product.code}', got {layer}", None))
    if side not in ("A", "B"):
        errors.append(locate("side", f"side must be 'A' or 'B', got '{side}'", None))
    if frame not in ("tool", "panel"):
        errors.append(locate("frame", f"frame must be 'tool' or 'panel', got '{frame}'", None))
    n = len(x)
    if n == 0:
        errors.append(locate("sites", "a measurement needs at least one site", None))
        return errors
    if n > settings.max_sites_per_measurement:
        errors.append(locate("sites", f"{n} sites; at most {settings.max_sites_per_measurement} "
                              "are accepted in one measurement", None))
        return errors
    for name, values in (("x_mm", x), ("y_mm", y), ("dx_um", dx), ("dy_um", dy)):
        bad = np.flatnonzero(~np.isfinite(values))
        for i in bad[:5]:
            errors.append(locate(name, f"must be a finite number, got {values[i]}", int(i)))
    if errors:
        return errors
    limit = settings.max_abs_displacement_um
    length = np.hypot(dx, dy)
    for i in np.flatnonzero(length > limit)[:5]:
        errors.append(locate("dx_um", f"displacement of {length[i]:.1f} um is over {limit:.0f} um "
                              "(1 mm): a tool or unit error, not overlay", int(i)))
    half_w, half_h = product.panel_width_mm / 2, product.panel_height_mm / 2
    outside = np.flatnonzero((np.abs(x) > half_w) | (np.abs(y) > half_h))
    for i in outside[:5]:
        errors.append(locate("x_mm", f"site ({x[i]}, {y[i]}) mm lies outside the "
                              f"{product.panel_width_mm} x {product.panel_height_mm} mm panel "
                              "(coordinates are about the panel centre)", int(i)))
    order = np.lexsort((y, x))
    xs, ys = x[order], y[order]
    dup = np.flatnonzero((np.diff(xs) == 0) & (np.diff(ys) == 0))
    for j in dup[:5]:
        i = int(order[j + 1])
        errors.append(locate("x_mm", f"site ({x[i]}, {y[i]}) mm appears more than once in the "
                              "measurement", i))
    return errors
