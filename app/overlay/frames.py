"""Tool frame <-> panel frame for side B (the panel turned over before it is measured).

Panel frame: origin at the nominal panel centre, x right, y up, looking at side A. Side A's tool
frame is the panel frame. Side B is measured looking at side B:

- flip axis "y" (turned like a book page): x_panel = -x_tool, dx_panel = -dx_tool; y, dy kept.
- flip axis "x": y_panel = -y_tool, dy_panel = -dy_tool; x, dx kept.

Each mirror is its own inverse, so the same functions convert panel -> tool. Fitted terms follow
by substituting the mirror into the model (see ``model``); for a flip about y that gives Tx, Ox,
Oy, Ky change sign and Ty, Sx, Sy, Kx are kept, which is what fitting mirrored sites gives.
"""

from __future__ import annotations

from typing import Final, Literal

import numpy as np

from app.overlay.errors import OverlayInputError
from app.overlay.model import FloatArray

Side = Literal["A", "B"]
FlipAxis = Literal["x", "y"]
SIDES: Final = ("A", "B")
FLIP_AXES: Final = ("x", "y")

# Sign of each term (TERM_NAMES order) under each mirror. Derivation, flip about y:
# dx' = -dx, x' = -x  =>  dx' = -Tx + Sx x' + Ox y' + Kx x'y'  (Tx, Ox flip; Sx, Kx kept)
# dy' =  dy          =>  dy' =  Ty + Sy y' - Oy x' - Ky x'y'  (Oy, Ky flip; Ty, Sy kept)
# and the same with the roles of x and y exchanged for a flip about x.
_TERM_SIGNS: Final[dict[str, FloatArray]] = {
    "y": np.array([-1.0, 1.0, 1.0, 1.0, -1.0, -1.0, 1.0, -1.0]),
    "x": np.array([1.0, -1.0, 1.0, 1.0, -1.0, -1.0, -1.0, 1.0]),
}


def _check(side: str, flip_axis: str) -> None:
    if side not in SIDES:
        raise OverlayInputError(f"side must be 'A' or 'B', got {side!r}")
    if flip_axis not in FLIP_AXES:
        raise OverlayInputError(f"flip_axis must be 'x' or 'y', got {flip_axis!r}")


def mirror_sites(
    x: FloatArray, y: FloatArray, dx: FloatArray, dy: FloatArray, *, side: str, flip_axis: str
) -> tuple[FloatArray, FloatArray, FloatArray, FloatArray]:
    """Convert site positions (mm) and displacements (um) between tool and panel frame.

    Identity on side A; the mirror of ``flip_axis`` on side B. Works in either direction.
    """
    _check(side, flip_axis)
    arrays = tuple(np.asarray(a, dtype=np.float64) for a in (x, y, dx, dy))
    x, y, dx, dy = arrays
    if side == "A":
        return x, y, dx, dy
    if flip_axis == "y":
        return -x, y, -dx, dy
    return x, -y, dx, -dy


def mirror_terms(terms: FloatArray, *, side: str, flip_axis: str) -> FloatArray:
    """Convert term vectors of shape (..., 8) between tool and panel frame (either direction)."""
    _check(side, flip_axis)
    t = np.asarray(terms, dtype=np.float64)
    if t.shape[-1:] != (8,):
        raise OverlayInputError(f"terms must have 8 entries on the last axis, got shape {t.shape}")
    if side == "A":
        return t.copy()
    return t * _TERM_SIGNS[flip_axis]


def mirror_covariance(cov: FloatArray, *, side: str, flip_axis: str) -> FloatArray:
    """Convert term covariances of shape (..., 8, 8) between frames: S C S with S = diag(signs)."""
    _check(side, flip_axis)
    c = np.asarray(cov, dtype=np.float64)
    if side == "A":
        return c.copy()
    s = _TERM_SIGNS[flip_axis]
    return c * s[:, np.newaxis] * s[np.newaxis, :]
