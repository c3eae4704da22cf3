"""The fit guard: how far a fitted model can be trusted where it is used.

A model that the sites determine can still be useless where it is used: four sites in a 10 mm
square fix a scale term, but its noise, carried out to check points 230 mm away, grows by the
ratio of the distances (a median worst vector of some 50 um at the default check points from 1
um of site noise). The rule is on the variance of the model's prediction. With B the basis at
the sites and z(p) the basis at a point p, ordinary least squares gives var(model(p)) = sigma^2
h(p), where h(p) = z(p)^T (B^T B)^-1 z(p) is the leverage of p (for a site, its hat-matrix
diagonal; the same quantity as the standard error of the mean prediction in statsmodels' OLS
``get_prediction``, divided by sigma). A model is kept only where h(p) <= ``LEVERAGE_MAX`` = 1
over the reach, the box around the product's check points: its error there is then no larger
than the noise of a single site measured at that point, so a fit never claims more than the
sites can say. Translation always passes (h = 1/n), so there is always a fallback. h is a convex
quadratic along every line parallel to an axis (z is affine in u for fixed v and the other way
round, and (B^T B)^-1 is positive definite), so its maximum over a box is at one of the box's
corners; the four corners are all that is evaluated. The Gram-Schmidt factor B = W R (W
orthogonal columns, R unit upper triangular) gives h = sum_i c_i^2 / |w_i|^2 with R^T c = z, for
every nested model at once (``leverage``).
"""

from __future__ import annotations

from typing import TYPE_CHECKING, Final

import numpy as np
from numpy.typing import NDArray

from app.overlay.errors import OverlayInputError
from app.overlay.model import FloatArray

if TYPE_CHECKING:
    from app.overlay._lsq import Orthogonal

IntArray = NDArray[np.int64]
#: Model names as in ``_lsq.MODELS``, fullest first.
_MODELS: Final = ("trapezoid", "linear", "translation")
#: Largest leverage over the reach for a model to be kept (see the module docstring); the
#: margin above 1 keeps four sites exactly at the reach's corners (h = 1 there) from falling
#: back on round-off.
LEVERAGE_MAX: Final = 1.0 + 1e-9


def leverage(orth: Orthogonal, pu: FloatArray, pv: FloatArray) -> FloatArray:
    """Leverage h at points pu, pv (g, m) (normalised like the sites) of every nested model.

    Returns (g, m, k): entry [..., i] is h for the model of the first i + 1 basis columns.
    Forward substitution R^T c = z on the unit triangular factor, then
    h = sum_i c_i^2 / |w_i|^2 (|w_0|^2 = n for the ones column; see the module docstring).
    """
    g, n = orth.n_sites
    if orth.k == 1:
        return np.full((*pu.shape, 1), 1.0 / n)
    swap = orth.swap[:, np.newaxis]
    z = [np.ones_like(pu), np.where(swap, pv, pu), np.where(swap, pu, pv), pu * pv]
    c: list[FloatArray] = []
    parts = []
    for j in range(orth.k):
        cj = z[j] - sum((orth.mu[i][j][:, np.newaxis] * c[i] for i in range(j)), 0.0 * pu)
        c.append(cj)
        inv = np.full(g, 1.0 / n) if j == 0 else orth.inv_ww[j]
        parts.append(np.square(cj) * inv[:, np.newaxis])
    return np.cumsum(np.stack(parts, axis=-1), axis=-1)


def reach_leverage(
    orth: Orthogonal, frame: FloatArray, reach: FloatArray
) -> dict[str, FloatArray]:
    """Largest leverage over the reach of every model ``orth`` can carry; (g,) each.

    ``reach`` (g, 4) is (x_lo, x_hi, y_lo, y_hi) in mm; ``frame`` (g, 3) is the sites'
    normalisation. The maximum over a box is at a corner (module docstring).
    """
    cx, cy, s = (frame[:, i, np.newaxis] for i in range(3))
    pu = (reach[:, [0, 1, 0, 1]] - cx) / s
    pv = (reach[:, [2, 2, 3, 3]] - cy) / s
    h = leverage(orth, pu, pv).max(axis=1)
    out = {"translation": h[:, 0]}
    if orth.k >= 3:
        out["linear"] = h[:, 2]
    if orth.k == 4:
        out["trapezoid"] = h[:, 3]
    return out


def sites_box(x: FloatArray, y: FloatArray) -> FloatArray:
    """The box around each measurement's own sites (g, n) as a reach (g, 4)."""
    return np.stack([x.min(axis=1), x.max(axis=1), y.min(axis=1), y.max(axis=1)], axis=-1)


def cover_reason(name: str, h: float) -> str:
    return (
        f"sites cover too little of the check points for {name} (its error there would be "
        f"up to {np.sqrt(h):.1f} x the site noise)"
    )


def chosen_leverage(leverage: dict[str, FloatArray], choice: IntArray) -> FloatArray:
    """The largest leverage over the reach of the model each measurement got; (g,)."""
    table = np.stack([leverage.get(m, leverage["translation"]) for m in _MODELS], axis=-1)
    return table[np.arange(choice.size), choice]


def reach_of(points_mm: FloatArray) -> FloatArray:
    """The reach of a product: the box (x_lo, x_hi, y_lo, y_hi) around its check points (P, 2).

    Raises
    ------
    OverlayInputError
        No points, a wrong shape or non-finite values.
    """
    p = np.asarray(points_mm, dtype=np.float64)
    if p.ndim != 2 or p.shape[1] != 2 or p.shape[0] == 0:
        raise OverlayInputError(f"points_mm must have shape (P, 2), P >= 1, got {p.shape}")
    if not np.isfinite(p).all():
        raise OverlayInputError("points_mm must be finite")
    lo, hi = p.min(axis=0), p.max(axis=0)
    return np.array([lo[0], hi[0], lo[1], hi[1]])


def check_reach(reach_mm: object, rows: int | None) -> FloatArray | None:
    """``reach_mm`` as (4,) (rows None) or (rows, 4): finite boxes with lo <= hi."""
    if reach_mm is None:
        return None
    r = np.asarray(reach_mm, dtype=np.float64)
    shapes = [(4,)] if rows is None else [(4,), (rows, 4)]
    if r.shape not in shapes:
        want = " or ".join(str(t) for t in shapes)
        raise OverlayInputError(f"reach_mm must have shape {want}, got {r.shape}")
    if not np.isfinite(r).all():
        raise OverlayInputError("reach_mm must be finite")
    box = r.reshape(-1, 4)
    if np.any(box[:, 0] > box[:, 1]) or np.any(box[:, 2] > box[:, 3]):
        raise OverlayInputError("reach_mm is (x_lo, x_hi, y_lo, y_hi) with lo <= hi")
    return r
