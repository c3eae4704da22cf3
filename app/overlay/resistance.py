"""Resistance of a copper connection and the extra resistance of a longer route.

R = rho L / A with A = w t for a rectangular cross-section, and rho(T) = rho_20 (1 + alpha
(T - 20 C)) (OpenStax University Physics vol. 2, "Resistivity and Resistance"). SI units
throughout: metres, ohms, ohm metres, degrees Celsius.
"""

from __future__ import annotations

import math
from typing import Final

from app.overlay.errors import OverlayInputError

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


def extra_resistance_ohm(
    extra_length_m: float, width_m: float, thickness_m: float, *, rho_ohm_m: float = RHO_COPPER_20C
) -> float:
    """Resistance added by ``extra_length_m`` of routing: rho dL / (w t) (ohm)."""
    try:
        return resistance_ohm(extra_length_m, width_m, thickness_m, rho_ohm_m=rho_ohm_m)
    except OverlayInputError as exc:
        raise OverlayInputError(str(exc).replace("length_m", "extra_length_m", 1)) from None
