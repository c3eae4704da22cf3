"""Resistance of a copper conductor: the handbook constants and R = rho L / A.

R = rho L / A with A = w t for a rectangular cross-section, and rho(T) = rho_20 (1 + alpha
(T - 20 C)) (OpenStax University Physics vol. 2, "Resistivity and Resistance"). SI units
throughout, except where a name says um.

A stacked-via connection through the build-up: each interface shifts the next via sideways by
that interface's L2L offset, so the current takes an extra lateral path of about
sum_k |L2L_k(p)| through the pads, extra R ~ rho sum_k |L2L_k(p)| / (w_pad t_cu) (conventions.md,
"Vias, capture margin and connection resistance"). A small figure beside the spread of plated
copper resistivity and thickness: reported with its size (``stacked_via``), never a reason to
hold. Whether each via lands on its pad at all is in ``capture``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Final

import numpy as np

from app.overlay.errors import OverlayInputError
from app.overlay.model import FloatArray

#: Copper resistivity at 20 C, ohm m (OpenStax University Physics vol. 2, "Resistivity and
#: Resistance", table of resistivities).
RHO_COPPER_20C: Final = 1.68e-8
#: Temperature coefficient of copper's resistivity, per C (same source and table).
ALPHA_COPPER: Final = 0.0039
#: International Annealed Copper Standard: 1.7241 micro-ohm cm = 1.7241e-8 ohm m at 20 C.
RHO_IACS_ANNEALED: Final = 1.7241e-8


def _finite(name: str, value: float) -> float:
    v = float(value)
    if not math.isfinite(v):
        raise OverlayInputError(f"{name} must be a finite number, got {value!r}")
    return v


def _positive(name: str, value: float) -> float:
    v = _finite(name, value)
    if v <= 0.0:
        raise OverlayInputError(f"{name} must be > 0, got {value!r}")
    return v


def resistivity_at(
    temp_c: float, *, rho_20c: float = RHO_COPPER_20C, alpha: float = ALPHA_COPPER
) -> float:
    """Resistivity (ohm m) at ``temp_c`` by the linear law rho_20 (1 + alpha (T - 20)).

    Raises
    ------
    OverlayInputError
        Non-finite input, non-positive ``rho_20c``, or a temperature so far below 20 C that
        the linear law gives a resistivity <= 0 (it does not hold there).
    """
    t = _finite("temp_c", temp_c)
    rho20 = _positive("rho_20c", rho_20c)
    a = _finite("alpha", alpha)
    rho = rho20 * (1.0 + a * (t - 20.0))
    if rho <= 0.0:
        raise OverlayInputError(f"the linear law gives rho <= 0 at {t!r} C; out of its range")
    return rho


def resistance_ohm(
    length_m: float, width_m: float, thickness_m: float, *, rho_ohm_m: float = RHO_COPPER_20C
) -> float:
    """Resistance rho L / (w t) of a rectangular conductor (ohm).

    Raises
    ------
    OverlayInputError
        Negative length, non-positive width, thickness or resistivity, or non-finite input.
    """
    length = _finite("length_m", length_m)
    if length < 0.0:
        raise OverlayInputError(f"length_m must be >= 0, got {length_m!r}")
    area = _positive("width_m", width_m) * _positive("thickness_m", thickness_m)
    return _positive("rho_ohm_m", rho_ohm_m) * length / area


def stacked_extra_resistance_ohm(
    l2l_length_um: object,
    *,
    pad_width_um: float,
    copper_thickness_um: float,
    rho_ohm_m: float = RHO_COPPER_20C,
) -> FloatArray:
    """Extra resistance of a stacked-via chain from its lateral shifts, per point (ohm).

    ``l2l_length_um`` (K, P): |L2L_k(p)| of each interface k at each point p. Returns
    rho * sum_k |L2L_k(p)| / (w_pad t_cu), shape (P,) (docs/conventions.md; R = rho L / A, OpenStax
    University Physics vol. 2, "Resistivity and Resistance").
    """
    lengths = np.asarray(l2l_length_um, dtype=np.float64)
    if lengths.ndim != 2 or not np.isfinite(lengths).all() or np.any(lengths < 0.0):
        raise OverlayInputError("l2l_length_um must be finite lengths >= 0, shape (K, P)")
    for name, value in (
        ("pad_width_um", pad_width_um),
        ("copper_thickness_um", copper_thickness_um),
        ("rho_ohm_m", rho_ohm_m),
    ):
        if not (math.isfinite(value) and value > 0.0):
            raise OverlayInputError(f"{name} must be positive and finite, got {value!r}")
    area_m2 = pad_width_um * 1e-6 * copper_thickness_um * 1e-6
    return np.asarray(rho_ohm_m * lengths.sum(axis=0) * 1e-6 / area_m2)


@dataclass(frozen=True)
class StackedVia:
    """The stacked-via connection's extra resistance from lateral shifts: a figure, not a rule.

    Attributes
    ----------
    lateral_um : float
        sum_k |L2L_k(p)| at the worst check point, um.
    at_mm : tuple of float
        That point.
    extra_ohm : float
        rho * lateral / (w_pad t_cu) there.
    chain_ohm : float or None
        The chain's own resistance, sum_k rho depth / (pi (D_via,k / 2)^2) (filled copper vias),
        when the via depth is known.
    relative : float or None
        extra_ohm / chain_ohm.
    """

    lateral_um: float
    at_mm: tuple[float, float]
    extra_ohm: float
    chain_ohm: float | None
    relative: float | None


def stacked_via(
    l2l_length_um: FloatArray,
    via_diameter_um: FloatArray,
    points_mm: FloatArray,
    *,
    pad_width_um: float,
    copper_thickness_um: float,
    via_depth_um: float | None = None,
    rho_ohm_m: float = RHO_COPPER_20C,
) -> StackedVia:
    """Worst extra resistance over the check points of a chain through K interfaces.

    ``l2l_length_um`` (K, P) as in ``stacked_extra_resistance_ohm``; ``via_diameter_um`` (K,)
    the via of each interface; ``points_mm`` (P, 2). R = rho L / A throughout (OpenStax
    University Physics vol. 2, "Resistivity and Resistance").
    """
    pts = np.asarray(points_mm, dtype=np.float64).reshape(-1, 2)
    lengths = np.asarray(l2l_length_um, dtype=np.float64).reshape(-1, pts.shape[0])
    extra = stacked_extra_resistance_ohm(
        lengths, pad_width_um=pad_width_um, copper_thickness_um=copper_thickness_um,
        rho_ohm_m=rho_ohm_m,
    )
    i = int(extra.argmax())
    chain = None
    if via_depth_um is not None:
        if not (math.isfinite(via_depth_um) and via_depth_um > 0.0):
            raise OverlayInputError(f"via_depth_um must be positive, got {via_depth_um!r}")
        area_m2 = math.pi * (np.asarray(via_diameter_um, dtype=np.float64) * 1e-6 / 2.0) ** 2
        chain = float(np.sum(rho_ohm_m * via_depth_um * 1e-6 / area_m2))
    return StackedVia(
        lateral_um=float(lengths[:, i].sum()),
        at_mm=(float(pts[i, 0]), float(pts[i, 1])),
        extra_ohm=float(extra[i]),
        chain_ohm=chain,
        relative=None if not chain else float(extra[i]) / chain,
    )
