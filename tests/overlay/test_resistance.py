"""Copper resistance: the OpenStax handbook values, temperature, extra routed length."""

from __future__ import annotations

import math

import pytest

from app.overlay.errors import OverlayInputError
from app.overlay.resistance import (
    ALPHA_COPPER,
    RHO_COPPER_20C,
    RHO_IACS_ANNEALED,
    extra_resistance_ohm,
    resistance_ohm,
    resistivity_at,
)


def test_handbook_constants() -> None:
    # reference: OpenStax University Physics vol. 2, "Resistivity and Resistance" (copper)
    assert RHO_COPPER_20C == 1.68e-8
    assert ALPHA_COPPER == 0.0039
    # reference: IACS annealed copper, 1.7241 micro-ohm cm
    assert pytest.approx(1.7241e-6 * 1e-2) == RHO_IACS_ANNEALED


def test_one_millimetre_line_at_20c() -> None:
    # reference: OpenStax rho = 1.68e-8 ohm m; R = rho L / A = 1.68e-8 * 1e-3 / (2e-6 * 2e-6)
    assert resistance_ohm(1e-3, 2e-6, 2e-6) == pytest.approx(4.2, rel=1e-12)
    assert resistivity_at(20.0) == RHO_COPPER_20C


def test_temperature_dependence_at_70c() -> None:
    # reference: OpenStax rho(T) = rho_20 (1 + alpha (T - 20)): 1.68e-8 * (1 + 0.0039 * 50)
    rho = resistivity_at(70.0)
    assert rho == pytest.approx(1.68e-8 * 1.195, rel=1e-12)
    assert resistance_ohm(1e-3, 2e-6, 2e-6, rho_ohm_m=rho) == pytest.approx(4.2 * 1.195, rel=1e-12)
    assert resistivity_at(70.0, rho_20c=RHO_IACS_ANNEALED) > rho


def test_extra_length() -> None:
    # 50 um of extra routing on a 10 um x 15 um line: rho dL / (w t), plain arithmetic.
    extra = extra_resistance_ohm(50e-6, 10e-6, 15e-6)
    assert extra == pytest.approx(1.68e-8 * 50e-6 / 150e-12, rel=1e-12)
    assert extra == pytest.approx(
        resistance_ohm(1.05e-3, 10e-6, 15e-6) - resistance_ohm(1e-3, 10e-6, 15e-6), rel=1e-9
    )
    assert extra_resistance_ohm(0.0, 10e-6, 15e-6) == 0.0


@pytest.mark.parametrize(
    "args, message",
    [
        ((-1e-3, 2e-6, 2e-6), "length_m must be >= 0"),
        ((1e-3, 0.0, 2e-6), "width_m must be > 0"),
        ((1e-3, 2e-6, -2e-6), "thickness_m must be > 0"),
        ((math.nan, 2e-6, 2e-6), "length_m must be a finite number"),
        ((1e-3, math.inf, 2e-6), "width_m must be a finite number"),
    ],
)
def test_bad_input(args: tuple[float, float, float], message: str) -> None:
    with pytest.raises(OverlayInputError, match=message):
        resistance_ohm(*args)
    with pytest.raises(OverlayInputError):
        extra_resistance_ohm(*args)


def test_bad_resistivity_and_temperature() -> None:
    with pytest.raises(OverlayInputError, match="extra_length_m must be >= 0"):
        extra_resistance_ohm(-1.0, 1e-6, 1e-6)
    with pytest.raises(OverlayInputError, match="rho_ohm_m"):
        resistance_ohm(1e-3, 1e-6, 1e-6, rho_ohm_m=0.0)
    with pytest.raises(OverlayInputError, match="temp_c"):
        resistivity_at(math.nan)
    with pytest.raises(OverlayInputError, match="out of its range"):
        resistivity_at(-300.0)
