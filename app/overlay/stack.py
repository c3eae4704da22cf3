"""Accumulation of per-layer models into front-to-back (FTB) overlay.

Each layer is registered to the one beneath it, so the outermost layer of side S sits at
P_S(p) = sum over k of model_S,k(p) relative to the core, and FTB(p) = P_A(p) - P_B(p) + C(p)
(conventions.md, "Accumulation"). All term vectors come in the panel frame: the caller mirrors side
B's tool-frame terms with ``frames.mirror_terms`` first, which is what makes a bias shown the
same way by both sides' tools add up and a bias in the same panel direction cancel.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from app.overlay.errors import OverlayInputError
from app.overlay.model import N_TERMS, FloatArray, evaluate


@dataclass(frozen=True)
class StackResult:
    """Accumulated overlay of both sides at the check points (panel frame, um).

    Attributes
    ----------
    points_mm : array, shape (P, 2)
        Check points.
    position_a_um, position_b_um : array, shape (P, 2)
        Position of the outermost layer of each side relative to the core.
    ftb_um : array, shape (P, 2)
        position_a - position_b, plus the core term when given.
    ftb_length_um : array, shape (P,)
        Length of ``ftb_um``.
    worst_index : int
        Index of the longest FTB vector (the first one on a tie).
    worst_um : float
        Its length.
    worst_at_mm : tuple of float
        Its check point.
    l2l_worst_a_um, l2l_worst_b_um : array, shape (La,), (Lb,)
        Per layer, the largest length of that layer's own model over the points.
    cumulative_worst_um : array, shape (max(La, Lb),)
        Entry k-1: worst FTB length using layers 1..k of both sides (a side with fewer layers
        contributes all it has), plus the core term when given.
    residual_sigma_um : tuple of float
        Per axis, sqrt of the summed residual variances of all layers of both sides: scatter
        adds in variance, not in coefficients. 0 for layers without a variance.
    linear_worst_case_um : float
        Sum over all layers of the per-layer worst L2L length (planning figure only).
    rss_um : float
        Root-sum-square of the same per-layer figures (planning figure only).
    """

    points_mm: FloatArray
    position_a_um: FloatArray
    position_b_um: FloatArray
    ftb_um: FloatArray
    ftb_length_um: FloatArray
    worst_index: int
    worst_um: float
    worst_at_mm: tuple[float, float]
    l2l_worst_a_um: FloatArray
    l2l_worst_b_um: FloatArray
    cumulative_worst_um: FloatArray
    residual_sigma_um: tuple[float, float]
    linear_worst_case_um: float
    rss_um: float


def _finite_array(name: str, values: object, shape: tuple[int | None, ...]) -> FloatArray:
    """``values`` as float64 of ``shape`` (None matches any length), all finite."""
    a = np.asarray(values, dtype=np.float64)
    if a.ndim != len(shape) or any(
        s is not None and s != t for s, t in zip(shape, a.shape, strict=True)
    ):
        want = "(" + ", ".join("n" if s is None else str(s) for s in shape) + ")"
        raise OverlayInputError(f"{name} must have shape {want}, got {a.shape}")
    bad = np.argwhere(~np.isfinite(a))
    if bad.size:
        where = ", ".join(str(int(i)) for i in bad[0])
        raise OverlayInputError(f"{name}[{where}] is not finite")
    return a


def _frozen(a: FloatArray) -> FloatArray:
    a.setflags(write=False)
    return a


def accumulate(
    terms_a: FloatArray,
    terms_b: FloatArray,
    points_mm: FloatArray,
    *,
    residual_var_a: FloatArray | None = None,
    residual_var_b: FloatArray | None = None,
    core_terms: FloatArray | None = None,
) -> StackResult:
    """Accumulate both sides' layer models into FTB overlay at the check points.

    Parameters
    ----------
    terms_a, terms_b : array, shape (La, 8), (Lb, 8)
        Per-layer term vectors in the panel frame, layer 1 first; La or Lb may be 0.
    points_mm : array, shape (P, 2)
        Check points in mm, P >= 1.
    residual_var_a, residual_var_b : array, shape (La, 2), (Lb, 2), optional
        Per-layer residual variances (um^2) in x and y; None counts as zero.
    core_terms : array, shape (8,), optional
        The core's own side-A-to-side-B registration C(p), panel frame.

    Returns
    -------
    StackResult

    Raises
    ------
    OverlayInputError
        Wrong shapes, no points, negative variances or non-finite values.
    """
    ta = _finite_array("terms_a", terms_a, (None, N_TERMS))
    tb = _finite_array("terms_b", terms_b, (None, N_TERMS))
    points = _finite_array("points_mm", points_mm, (None, 2))
    if points.shape[0] == 0:
        raise OverlayInputError("points_mm needs at least one check point")
    variances = []
    for name, var, layers in (
        ("residual_var_a", residual_var_a, ta.shape[0]),
        ("residual_var_b", residual_var_b, tb.shape[0]),
    ):
        v = np.zeros((layers, 2)) if var is None else _finite_array(name, var, (layers, 2))
        if np.any(v < 0.0):
            raise OverlayInputError(f"{name} must be >= 0 (variances)")
        variances.append(v)
    n_points = points.shape[0]
    if core_terms is None:
        core = np.zeros((n_points, 2))
    else:
        c = _finite_array("core_terms", core_terms, (N_TERMS,))
        core = np.stack(evaluate(c, points[:, 0], points[:, 1]), axis=-1)

    # Per-layer displacement at every point, (L, P, 2).
    layer_a = np.stack(evaluate(ta, points[:, 0], points[:, 1]), axis=-1)
    layer_b = np.stack(evaluate(tb, points[:, 0], points[:, 1]), axis=-1)
    position_a = layer_a.sum(axis=0)
    position_b = layer_b.sum(axis=0)
    ftb = position_a - position_b + core
    ftb_length = np.hypot(ftb[:, 0], ftb[:, 1])
    worst = int(np.argmax(ftb_length))

    l2l_a = np.hypot(layer_a[..., 0], layer_a[..., 1]).max(axis=1, initial=0.0)
    l2l_b = np.hypot(layer_b[..., 0], layer_b[..., 1]).max(axis=1, initial=0.0)

    # FTB after the balanced pair k: running sums, the shorter side held at its total.
    pairs = max(ta.shape[0], tb.shape[0])
    cum_a = _running_sum(layer_a, pairs, n_points)
    cum_b = _running_sum(layer_b, pairs, n_points)
    cum_ftb = cum_a - cum_b + core
    cumulative = np.hypot(cum_ftb[..., 0], cum_ftb[..., 1]).max(axis=1, initial=0.0)

    var = variances[0].sum(axis=0) + variances[1].sum(axis=0)
    l2l_all = np.concatenate([l2l_a, l2l_b])
    return StackResult(
        points_mm=_frozen(points.copy()),
        position_a_um=_frozen(position_a),
        position_b_um=_frozen(position_b),
        ftb_um=_frozen(ftb),
        ftb_length_um=_frozen(ftb_length),
        worst_index=worst,
        worst_um=float(ftb_length[worst]),
        worst_at_mm=(float(points[worst, 0]), float(points[worst, 1])),
        l2l_worst_a_um=_frozen(l2l_a),
        l2l_worst_b_um=_frozen(l2l_b),
        cumulative_worst_um=_frozen(cumulative),
        residual_sigma_um=(float(np.sqrt(var[0])), float(np.sqrt(var[1]))),
        linear_worst_case_um=float(l2l_all.sum()),
        rss_um=float(np.sqrt(np.sum(l2l_all**2))),
    )


def _running_sum(layers: FloatArray, pairs: int, n_points: int) -> FloatArray:
    """Cumulative sums (pairs, P, 2) of per-layer displacements (L, P, 2), padded with the total."""
    out = np.zeros((pairs, n_points, 2))
    if layers.shape[0]:
        out[: layers.shape[0]] = np.cumsum(layers, axis=0)
        out[layers.shape[0] :] = out[layers.shape[0] - 1]
    return out


def default_check_points(
    width_mm: float, height_mm: float, *, n: int = 5, fraction: float = 0.9
) -> FloatArray:
    """Grid of check points over the central part of the panel, centred on the origin.

    Parameters
    ----------
    width_mm, height_mm : float
        Panel size.
    n : int
        Points per side of the grid.
    fraction : float
        Share of the width and height the grid spans (0 < fraction <= 1).

    Returns
    -------
    array, shape (n*n, 2)
        Points (x, y) in mm, x varying fastest. A single point (n = 1) is the panel centre.
    """
    for name, value in (("width_mm", width_mm), ("height_mm", height_mm)):
        if not np.isfinite(value) or value <= 0.0:
            raise OverlayInputError(f"{name} must be a positive number, got {value!r}")
    if not isinstance(n, int | np.integer) or n < 1:
        raise OverlayInputError(f"n must be a positive integer, got {n!r}")
    if not np.isfinite(fraction) or not 0.0 < fraction <= 1.0:
        raise OverlayInputError(f"fraction must be in (0, 1], got {fraction!r}")
    xs = np.linspace(-0.5, 0.5, n) * fraction * width_mm if n > 1 else np.zeros(1)
    ys = np.linspace(-0.5, 0.5, n) * fraction * height_mm if n > 1 else np.zeros(1)
    gx, gy = np.meshgrid(xs, ys)
    return np.stack([gx.ravel(), gy.ravel()], axis=-1)
