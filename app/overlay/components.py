"""Variance components of a hierarchy of random effects, by analysis of variance.

Model: y = mu + a_1[g_1] + a_2[g_2] + ... + e, each a_j ~ N(0, s_j^2) over the groups g_j of
level j, levels from the coarsest to the finest (for FTB: exposure tool, lot on that tool, panel
in that lot), e the scatter of single layers.

Estimator (Henderson's method I, the method of moments): with P_j the projection onto the
group means of the first j levels together (P_0 the grand mean), the sequential sums of squares
SS_j = y'(P_j - P_{j-1})y have expectations

    E[SS_j] = sum_l s_l^2 (c_l(j) - c_l(j - 1)) + s_e^2 (G_j - G_{j-1}),
    c_l(j) = tr(P_j Z_l Z_l') = sum over groups G of level j of sum_h n_{G h}^2 / n_G,

(G_j: number of groups, n_{G h}: observations both in G and in group h of level l), and the
residual SS has expectation s_e^2 (N - G_last). Equating SS to their expectations gives a
triangular linear system. On balanced nested data these are the classical ANOVA estimators,
which equal REML when none is negative (Searle, Casella and McCulloch, Variance Components,
ch. 4 and 6, from memory). Negative estimates are set to zero and flagged.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from app.overlay.errors import OverlayInputError
from app.overlay.model import FloatArray

IntArray = NDArray[np.int64]


@dataclass(frozen=True)
class Components:
    """Estimated variances: one per level (coarsest first), then the residual."""

    variances: FloatArray  # shape (levels + 1,), >= 0
    truncated: NDArray[np.bool_]  # the moment estimate was negative and is reported as zero
    groups: IntArray  # number of groups at each level, then observations
    mean: float

    @property
    def shares(self) -> FloatArray:
        total = float(self.variances.sum())
        return self.variances / total if total > 0 else np.zeros_like(self.variances)


def _codes(labels: IntArray) -> tuple[IntArray, int]:
    _, codes = np.unique(labels, return_inverse=True)
    return codes.astype(np.int64), int(codes.max()) + 1


def _coefficient(group: IntArray, n_group: int, other: IntArray, n_other: int) -> float:
    """sum_G sum_h n_{G h}^2 / n_G for the cross-tabulation of two groupings (sparse: only the
    cells that occur are counted)."""
    cells, counts = np.unique(group * n_other + other, return_counts=True)
    sizes = np.bincount(group, minlength=n_group).astype(np.float64)
    return float(np.sum(counts.astype(np.float64) ** 2 / sizes[cells // n_other]))


def _between_ss(y: FloatArray, group: IntArray, n_group: int) -> float:
    """y' P y for the projection onto the means of ``group``."""
    sums = np.bincount(group, weights=y, minlength=n_group)
    sizes = np.bincount(group, minlength=n_group).astype(np.float64)
    keep = sizes > 0
    return float(np.sum(sums[keep] ** 2 / sizes[keep]))


def variance_components(values: FloatArray, levels: Sequence[IntArray], *,
                        absorbed: int = 0) -> Components:
    """Variance components of ``values`` over nested (or crossed) grouping ``levels``.

    Parameters
    ----------
    values : array, shape (n,)
    levels : sequence of integer label arrays, each shape (n,), coarsest first. Level j's groups
        are taken jointly with all coarser levels (a lot is the lot on that tool), so labels need
        not be unique across parents.
    absorbed : degrees of freedom of fixed effects (beyond the mean) already taken out of
        ``values``; they come off the residual's. Exact when those effects are orthogonal to
        the groups (balanced data).
    """
    y = np.asarray(values, dtype=np.float64)
    if y.ndim != 1 or y.size < 2:
        raise OverlayInputError("values must be one-dimensional with at least two entries")
    if not np.all(np.isfinite(y)):
        raise OverlayInputError(f"values has a non-finite entry at index "
                                f"{int(np.flatnonzero(~np.isfinite(y))[0])}")
    joint: list[tuple[IntArray, int]] = [(np.zeros(y.size, dtype=np.int64), 1)]
    for j, labels in enumerate(levels):
        lab = np.asarray(labels)
        if lab.shape != y.shape:
            raise OverlayInputError(f"level {j} has shape {lab.shape}, values {y.shape}")
        previous = joint[-1][0]
        own, n_own = _codes(np.asarray(lab, dtype=np.int64))
        joint.append(_codes(previous * n_own + own))
    joint.append((np.arange(y.size, dtype=np.int64), y.size))
    n_levels = len(levels)
    # Rows: SS of level 1..n_levels and the residual; columns: s_1..s_L and s_e.
    quadratic = [_between_ss(y, g, n) for g, n in joint]
    ss = np.diff(np.array(quadratic))
    counts = np.array([n for _, n in joint], dtype=np.float64)
    coef = np.zeros((n_levels + 1, n_levels + 1))
    for row in range(n_levels + 1):
        for col in range(n_levels):
            effect, n_effect = joint[col + 1]
            upper = _coefficient(*joint[row + 1], effect, n_effect)
            lower = _coefficient(*joint[row], effect, n_effect)
            coef[row, col] = upper - lower
        coef[row, n_levels] = counts[row + 1] - counts[row]
    coef[n_levels, n_levels] -= absorbed
    usable = np.diag(coef) > 0
    estimate: FloatArray = np.zeros(n_levels + 1)
    if np.all(usable):
        estimate = np.asarray(np.linalg.solve(coef, ss), dtype=np.float64)
    else:  # a level with no replication: drop it, its variance cannot be separated
        idx = np.flatnonzero(usable)
        estimate[idx] = np.linalg.lstsq(coef[np.ix_(idx, idx)], ss[idx], rcond=None)[0]
    truncated = estimate < 0
    return Components(np.maximum(estimate, 0.0), truncated,
                      counts[1:].astype(np.int64), float(y.mean()))
