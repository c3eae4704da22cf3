"""Exposure-tool fingerprints: mean terms per tool and cell against the rest of the fleet.

Terms come in each tool's own frame (side B mirrored back with ``frames.mirror_terms``), one row
per layer run. A cell is whatever the caller groups by besides the tool (side, or side and
layer). Per tool and cell: count, mean, and the two-sided t interval mean +/- t_{1-a/2, n-1}
s / sqrt(n); the same for the rest of the fleet in that cell, and the difference of the two
with Welch's interval (Welch-Satterthwaite degrees of freedom; NIST/SEMATECH e-Handbook 7.3.1).
Where a count is too small for an interval the half-width is NaN; callers report it as absent.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray
from scipy import stats

from app.overlay.errors import OverlayInputError
from app.overlay.model import FloatArray

IntArray = NDArray[np.int64]


@dataclass(frozen=True)
class Fingerprints:
    """Arrays of shape (tools, cells, 8) for means and half-widths, (tools, cells) for counts."""

    count: IntArray
    mean: FloatArray
    half_width: FloatArray
    rest_count: IntArray
    rest_mean: FloatArray
    rest_half_width: FloatArray
    difference: FloatArray  # mean - rest_mean
    difference_half_width: FloatArray


def _moments(
    terms: FloatArray, index: IntArray, size: int
) -> tuple[FloatArray, FloatArray, FloatArray]:
    n = np.bincount(index, minlength=size).astype(np.float64)
    s1 = np.stack([np.bincount(index, weights=terms[:, j], minlength=size) for j in range(8)], 1)
    s2 = np.stack([np.bincount(index, weights=terms[:, j] ** 2, minlength=size)
                   for j in range(8)], 1)
    return n, s1.astype(np.float64), s2.astype(np.float64)


def _mean_var(n: FloatArray, s1: FloatArray, s2: FloatArray) -> tuple[FloatArray, FloatArray]:
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = s1 / n[..., None]
        var = (s2 - n[..., None] * mean**2) / (n[..., None] - 1.0)
    return mean, np.maximum(var, 0.0)


def _t_half(n: FloatArray, var: FloatArray, confidence: float) -> FloatArray:
    with np.errstate(invalid="ignore", divide="ignore"):
        t = stats.t.ppf(0.5 + confidence / 2.0, n - 1.0)
        half = np.asarray(t, dtype=np.float64)[..., None] * np.sqrt(var / n[..., None])
    return np.where((n >= 2)[..., None], half, np.nan)


def fingerprints(
    terms: FloatArray, tool: IntArray, cell: IntArray, *, n_tools: int, n_cells: int,
    confidence: float = 0.95,
) -> Fingerprints:
    """Mean terms per (tool, cell) with t intervals, against the rest of the fleet.

    Parameters
    ----------
    terms : array, shape (n, 8), in each tool's own frame
    tool, cell : integer codes, shape (n,), in [0, n_tools) and [0, n_cells)
    """
    t = np.asarray(terms, dtype=np.float64)
    if t.ndim != 2 or t.shape[1] != 8:
        raise OverlayInputError(f"terms must have shape (n, 8), got {t.shape}")
    if not np.all(np.isfinite(t)):
        raise OverlayInputError("terms has a non-finite entry")
    if not 0.0 < confidence < 1.0:
        raise OverlayInputError(f"confidence must be in (0, 1), got {confidence}")
    tool = np.asarray(tool, dtype=np.int64)
    cell = np.asarray(cell, dtype=np.int64)
    if tool.shape != (t.shape[0],) or cell.shape != tool.shape:
        raise OverlayInputError("tool and cell codes must have one entry per row of terms")
    n, s1, s2 = _moments(t, tool * n_cells + cell, n_tools * n_cells)
    n, s1, s2 = n.reshape(n_tools, n_cells), s1.reshape(n_tools, n_cells, 8), \
        s2.reshape(n_tools, n_cells, 8)
    rest_n = n.sum(axis=0)[None] - n
    rest_s1 = s1.sum(axis=0)[None] - s1
    rest_s2 = s2.sum(axis=0)[None] - s2
    mean, var = _mean_var(n, s1, s2)
    rest_mean, rest_var = _mean_var(rest_n, rest_s1, rest_s2)
    with np.errstate(invalid="ignore", divide="ignore"):
        a = var / n[..., None]
        b = rest_var / rest_n[..., None]
        # Welch-Satterthwaite degrees of freedom.
        dof = (a + b) ** 2 / (a**2 / (n[..., None] - 1) + b**2 / (rest_n[..., None] - 1))
        diff_half = stats.t.ppf(0.5 + confidence / 2.0, dof) * np.sqrt(a + b)
    ok = ((n >= 2) & (rest_n >= 2))[..., None] & np.isfinite(diff_half)
    return Fingerprints(
        count=n.astype(np.int64), mean=np.where((n > 0)[..., None], mean, np.nan),
        half_width=_t_half(n, var, confidence), rest_count=rest_n.astype(np.int64),
        rest_mean=np.where((rest_n > 0)[..., None], rest_mean, np.nan),
        rest_half_width=_t_half(rest_n, rest_var, confidence),
        difference=mean - rest_mean, difference_half_width=np.where(ok, diff_half, np.nan),
    )
