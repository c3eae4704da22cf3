"""The layer table: each layer's fitted terms in the panel frame and in its tool's own frame.

Side B's terms go back to the tool frame through the same mirror that brought them into the
panel frame (``app.overlay.frames.mirror_terms``, its own inverse). Rotation and
non-orthogonality are re-derived from Ox and Oy after the mirror (docs/conventions.md: rotation =
(Ox + Oy)/2, non-orthogonality = Oy - Ox).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from app.overlay.frames import mirror_terms
from app.overlay.model import PER_MM_TO_MICRO
from app.schemas.panels import StackLayerRead


@dataclass(frozen=True)
class Terms:
    """Reported terms: µm, ppm, µrad, µm/mm²."""

    tx_um: float
    ty_um: float
    sx_ppm: float
    sy_ppm: float
    rotation_urad: float
    nonorthogonality_urad: float
    kx_um_per_mm2: float
    ky_um_per_mm2: float


@dataclass(frozen=True)
class LayerRow:
    layer: StackLayerRead
    panel: Terms
    tool: Terms


def _raw(r: StackLayerRead) -> np.ndarray:
    ox = (r.rotation_urad - r.nonorthogonality_urad / 2) / PER_MM_TO_MICRO
    oy = (r.rotation_urad + r.nonorthogonality_urad / 2) / PER_MM_TO_MICRO
    return np.array([r.tx_um, r.ty_um, r.sx_ppm / PER_MM_TO_MICRO, r.sy_ppm / PER_MM_TO_MICRO,
                     ox, oy, r.kx_um_per_mm2, r.ky_um_per_mm2])


def _reported(t: np.ndarray) -> Terms:
    return Terms(
        tx_um=float(t[0]), ty_um=float(t[1]), sx_ppm=float(t[2] * PER_MM_TO_MICRO),
        sy_ppm=float(t[3] * PER_MM_TO_MICRO),
        rotation_urad=float((t[4] + t[5]) / 2 * PER_MM_TO_MICRO),
        nonorthogonality_urad=float((t[5] - t[4]) * PER_MM_TO_MICRO),
        kx_um_per_mm2=float(t[6]), ky_um_per_mm2=float(t[7]),
    )


def layer_rows(layers: list[StackLayerRead], *, flip_axis: str) -> list[LayerRow]:
    """Rows by side then layer, each with its terms in both frames."""
    rows = []
    for r in sorted(layers, key=lambda r: (r.side, r.layer)):
        panel = _raw(r)
        rows.append(LayerRow(layer=r, panel=_reported(panel), tool=_reported(
            mirror_terms(panel, side=r.side, flip_axis=flip_axis))))
    return rows
