"""The per-layer overlay model and its term vector.

Model (panel or tool frame, x, y in mm about the panel centre, displacements in um)::

    dx = Tx + Sx*x - Ox*y + Kx*x*y
    dy = Ty + Sy*y + Oy*x + Ky*x*y

A term vector always has eight entries in the order of ``TERM_NAMES``, in *raw* units:
Tx, Ty in um; Sx, Sy, Ox, Oy in um/mm; Kx, Ky in um/mm^2. Terms that a fit did not use are
zero. Reporting units: 1 um/mm = 1e-3 = 1000 ppm for scale and 1000 urad for rotation.
"""

from __future__ import annotations

from typing import Final

import numpy as np
from numpy.typing import NDArray

FloatArray = NDArray[np.float64]

TERM_NAMES: Final = ("Tx", "Ty", "Sx", "Sy", "Ox", "Oy", "Kx", "Ky")
N_TERMS: Final = 8
#: um/mm to ppm (scale) or urad (rotation): 1 um / 1 mm = 1e-3.
PER_MM_TO_MICRO: Final = 1000.0

#: Index sets of the nested models, from the fullest to the fallback of last resort.
TERMS_TRAPEZOID: Final = (0, 1, 2, 3, 4, 5, 6, 7)
TERMS_LINEAR: Final = (0, 1, 2, 3, 4, 5)
TERMS_TRANSLATION: Final = (0, 1)


def design_matrix(x: FloatArray, y: FloatArray) -> FloatArray:
    """Stacked design matrix of the model.

    Parameters
    ----------
    x, y : array, shape (..., n)
        Site positions in mm.

    Returns
    -------
    array, shape (..., 2n, 8)
        Rows 0..n-1 give dx, rows n..2n-1 give dy, columns in ``TERM_NAMES`` order.
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    zeros = np.zeros_like(x)
    ones = np.ones_like(x)
    xy = x * y
    rows_dx = np.stack([ones, zeros, x, zeros, -y, zeros, xy, zeros], axis=-1)
    rows_dy = np.stack([zeros, ones, zeros, y, zeros, x, zeros, xy], axis=-1)
    return np.concatenate([rows_dx, rows_dy], axis=-2)


def evaluate(terms: FloatArray, x: FloatArray, y: FloatArray) -> tuple[FloatArray, FloatArray]:
    """Displacement (dx, dy) in um predicted by ``terms`` at points (x, y).

    Parameters
    ----------
    terms : array, shape (..., 8)
        Term vectors; leading dimensions broadcast against those of the points.
    x, y : array, shape (p,)
        Points in mm.

    Returns
    -------
    dx, dy : arrays, shape (..., p)
    """
    t = np.asarray(terms, dtype=np.float64)[..., np.newaxis, :]
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    xy = x * y
    dx = t[..., 0] + t[..., 2] * x - t[..., 4] * y + t[..., 6] * xy
    dy = t[..., 1] + t[..., 3] * y + t[..., 5] * x + t[..., 7] * xy
    return dx, dy


def report_units(terms: FloatArray) -> dict[str, float]:
    """The one conversion of a raw term vector to reporting units.

    Tx, Ty in um; Sx, Sy in ppm; Ox, Oy, rotation (Ox + Oy)/2 and non-orthogonality Oy - Ox in
    urad; Kx, Ky in um/mm^2.
    """
    t = [float(v) for v in np.asarray(terms, dtype=np.float64)]
    ox, oy = t[4] * PER_MM_TO_MICRO, t[5] * PER_MM_TO_MICRO
    return {
        "tx_um": t[0],
        "ty_um": t[1],
        "sx_ppm": t[2] * PER_MM_TO_MICRO,
        "sy_ppm": t[3] * PER_MM_TO_MICRO,
        "ox_urad": ox,
        "oy_urad": oy,
        "rotation_urad": (ox + oy) / 2,
        "nonorthogonality_urad": oy - ox,
        "kx_um_per_mm2": t[6],
        "ky_um_per_mm2": t[7],
    }
