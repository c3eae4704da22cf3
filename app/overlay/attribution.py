"""What drives FTB: per-panel FTB from layer terms, its spread at the check points, what each
layer, side or tool contributes to the mean FTB vector, and the what-if without a tool's bias.

FTB(p) = sum_k model_A,k(p) - sum_k model_B,k(p), every model in the panel frame (conventions.md,
"Accumulation"). The model is linear in its terms, so a panel's FTB is the model of the signed
sum of its layers' terms (sign +1 on side A, -1 on side B), evaluated at the check points.

Spread figure at a check point over a set of panels: |mean FTB vector| + 3 sigma, with sigma the
standard deviation along the direction of greatest spread (the square root of the larger
eigenvalue of the 2 x 2 sample covariance). The worst check point is the one where it is largest.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from app.overlay.errors import OverlayInputError
from app.overlay.model import FloatArray, evaluate

IntArray = NDArray[np.int64]


def panel_ftb_terms(terms: FloatArray, sign: FloatArray, panel: IntArray,
                    n_panels: int) -> FloatArray:
    """Signed sum of the layer terms of each panel, shape (n_panels, 8)."""
    t = np.asarray(terms, dtype=np.float64)
    if t.ndim != 2 or t.shape[1] != 8:
        raise OverlayInputError(f"terms must have shape (n, 8), got {t.shape}")
    signed = t * np.asarray(sign, dtype=np.float64)[:, None]
    return np.stack([np.bincount(panel, weights=signed[:, j], minlength=n_panels)
                     for j in range(8)], axis=1)


@dataclass(frozen=True)
class Spread:
    """FTB over panels at each check point: mean vector, largest sigma and the figure."""

    mean_dx: FloatArray  # (points,)
    mean_dy: FloatArray
    sigma: FloatArray  # along the direction of greatest spread
    figure: FloatArray  # |mean| + 3 sigma
    worst: int  # index of the check point with the largest figure

    @property
    def worst_figure(self) -> float:
        return float(self.figure[self.worst])


def spread(ftb_terms: FloatArray, x: FloatArray, y: FloatArray) -> Spread:
    """FTB spread at the check points (x, y in mm) over panels given by their FTB terms."""
    f = np.asarray(ftb_terms, dtype=np.float64)
    if f.ndim != 2 or f.shape[0] < 2:
        raise OverlayInputError("the FTB spread needs at least two panels")
    dx, dy = evaluate(f, x, y)  # (panels, points)
    mx, my = dx.mean(axis=0), dy.mean(axis=0)
    vxx, vyy = dx.var(axis=0, ddof=1), dy.var(axis=0, ddof=1)
    vxy = ((dx - mx) * (dy - my)).sum(axis=0) / (dx.shape[0] - 1)
    # Larger eigenvalue of [[vxx, vxy], [vxy, vyy]].
    largest = (vxx + vyy) / 2.0 + np.sqrt(((vxx - vyy) / 2.0) ** 2 + vxy**2)
    sigma = np.sqrt(largest)
    figure = np.hypot(mx, my) + 3.0 * sigma
    return Spread(mx, my, sigma, figure, int(np.argmax(figure)))


@dataclass(frozen=True)
class Contributions:
    """Mean contribution of each group to the mean FTB vector at one check point."""

    dx: FloatArray  # (groups,)
    dy: FloatArray
    share: FloatArray  # projection on the mean FTB vector / its squared length; sums to 1
    count: IntArray  # layer runs in the group


def contributions(
    terms: FloatArray, sign: FloatArray, group: IntArray, n_groups: int, n_panels: int,
    x: float, y: float,
) -> Contributions:
    """Each group's share of the mean FTB vector at the point (x, y).

    A group (a layer and side, a tool, ...) contributes sign * model(p) of each of its layer
    runs, averaged over all ``n_panels`` panels, so the contributions add up to the mean FTB.
    """
    if n_panels < 1:
        raise OverlayInputError("contributions need at least one panel")
    dx, dy = evaluate(np.asarray(terms, dtype=np.float64), np.array([x]), np.array([y]))
    s = np.asarray(sign, dtype=np.float64)
    cx = np.bincount(group, weights=s * dx[:, 0], minlength=n_groups) / n_panels
    cy = np.bincount(group, weights=s * dy[:, 0], minlength=n_groups) / n_panels
    total_x, total_y = cx.sum(), cy.sum()
    length2 = total_x**2 + total_y**2
    share = (cx * total_x + cy * total_y) / length2 if length2 > 0 else np.zeros_like(cx)
    return Contributions(cx, cy, share, np.bincount(group, minlength=n_groups).astype(np.int64))


def along(ftb_dx: FloatArray, ftb_dy: FloatArray, direction: tuple[float, float]) -> FloatArray:
    """Component of vectors along a direction (unit vector taken; x axis if it has no length)."""
    length = float(np.hypot(*direction))
    ux, uy = (direction[0] / length, direction[1] / length) if length > 0 else (1.0, 0.0)
    return np.asarray(ftb_dx) * ux + np.asarray(ftb_dy) * uy
