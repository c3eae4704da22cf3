"""Copper resistance: the OpenStax handbook values, temperature, the stacked-via figure."""

from __future__ import annotations

import math

import numpy as np
import pytest

from app.overlay.errors import OverlayInputError
from app.overlay.resistance import (
    ALPHA_COPPER,
    RHO_COPPER_20C,
    RHO_IACS_ANNEALED,
    resistance_ohm,
    resistivity_at,
    stacked_extra_resistance_ohm,
    stacked_via,
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


def test_bad_resistivity_and_temperature() -> None:
    with pytest.raises(OverlayInputError, match="rho_ohm_m"):
        resistance_ohm(1e-3, 1e-6, 1e-6, rho_ohm_m=0.0)
    with pytest.raises(OverlayInputError, match="temp_c"):
        resistivity_at(math.nan)
    with pytest.raises(OverlayInputError, match="out of its range"):
        resistivity_at(-300.0)


def test_stacked_extra_resistance_is_rho_l_over_a() -> None:
    # reference: OpenStax University Physics vol. 2, R = rho L / A: 30 um of lateral path
    # through a 60 um wide, 15 um thick pad: 1.68e-8 * 30e-6 / (60e-6 * 15e-6) = 5.6e-4 ohm.
    lengths = np.array([[10.0, 2.0], [12.0, 1.0], [8.0, 0.5]])
    r = stacked_extra_resistance_ohm(lengths, pad_width_um=60.0, copper_thickness_um=15.0)
    assert r[0] == pytest.approx(5.6e-4, rel=1e-12)
    assert r[0] == pytest.approx(resistance_ohm(30e-6, 60e-6, 15e-6), rel=1e-12)
    assert r[1] == pytest.approx(resistance_ohm(3.5e-6, 60e-6, 15e-6), rel=1e-12)
    with pytest.raises(OverlayInputError, match="pad_width_um"):
        stacked_extra_resistance_ohm(lengths, pad_width_um=0.0, copper_thickness_um=15.0)
    with pytest.raises(OverlayInputError, match="l2l_length_um"):
        stacked_extra_resistance_ohm(-lengths, pad_width_um=60.0, copper_thickness_um=15.0)


def test_stacked_via_figures() -> None:
    # reference: OpenStax R = rho L / A. Three interfaces at two points; 20 um deep filled vias
    # of 35 um: each 1.68e-8 * 20e-6 / (pi * 17.5e-6^2) = 3.492e-4 ohm.
    lengths = np.array([[10.0, 2.0], [12.0, 1.0], [8.0, 0.5]])
    points = np.array([[-100.0, 0.0], [100.0, 0.0]])
    got = stacked_via(lengths, np.full(3, 35.0), points, pad_width_um=60.0,
                      copper_thickness_um=15.0, via_depth_um=20.0)
    assert got.at_mm == (-100.0, 0.0)
    assert got.lateral_um == 30.0
    assert got.extra_ohm == pytest.approx(5.6e-4, rel=1e-12)
    one_via = 1.68e-8 * 20e-6 / (math.pi * 17.5e-6**2)
    assert got.chain_ohm == pytest.approx(3 * one_via, rel=1e-12)
    assert got.relative == pytest.approx(5.6e-4 / (3 * one_via), rel=1e-12)
    bare = stacked_via(lengths, np.full(3, 35.0), points, pad_width_um=60.0,
                       copper_thickness_um=15.0)
    assert bare.chain_ohm is None and bare.relative is None
