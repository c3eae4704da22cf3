"""Via capture: margin, miss probability, via-pad overlap, stacked-via extra resistance."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats

from app.overlay.capture import (
    ViaGeometry,
    capture_all,
    capture_margin_um,
    interface_capture,
    miss_probability,
    overlap_area_um2,
    resistance_ratio,
)
from app.overlay.errors import OverlayInputError

shapely = pytest.importorskip("shapely")


def monte_carlo_miss(mean: tuple[float, float], sigma: tuple[float, float], margin: float,
                     n: int = 1_000_000, seed: int = 7) -> tuple[float, float]:
    """Seeded Monte Carlo estimate of P(|d| > m) and its standard error."""
    rng = np.random.default_rng(seed)
    d = rng.normal(mean, sigma, size=(n, 2))
    p = float(np.mean(np.hypot(d[:, 0], d[:, 1]) > margin))
    return p, math.sqrt(max(p * (1 - p), 1e-12) / n)


def test_capture_margin() -> None:
    # docs/conventions.md: m = (D_pad - D_via) / 2.
    assert capture_margin_um(35.0, 60.0) == 12.5
    geometry = ViaGeometry(35.0, 60.0, {5: (30.0, 60.0)})
    assert geometry.margin_um(4) == 12.5
    assert geometry.margin_um(5) == 15.0


@pytest.mark.parametrize("via, pad", [(60.0, 60.0), (0.0, 60.0), (70.0, 60.0), (math.nan, 60)])
def test_capture_margin_needs_pad_larger_than_via(via: float, pad: float) -> None:
    with pytest.raises(OverlayInputError, match="via diameter < pad diameter"):
        capture_margin_um(via, pad)
    with pytest.raises(OverlayInputError):
        ViaGeometry(35.0, 60.0, {3: (via, pad)})


@pytest.mark.parametrize("mean, sigma", [((4.0, -3.0), 2.0), ((0.0, 0.0), 5.0), ((11.0, 2.0), 1.2)])
def test_isotropic_miss_is_the_rice_tail(mean: tuple[float, float], sigma: float) -> None:
    # reference: scipy.stats.rice (conventions.md: P(|d| > r) = rice.sf(r, R/s, scale=s)), and a
    # seeded Monte Carlo that does not go through the formula at all.
    p = float(miss_probability(mean, (sigma, sigma), 12.5)[0])
    assert p == pytest.approx(stats.rice.sf(12.5, math.hypot(*mean) / sigma, scale=sigma))
    mc, se = monte_carlo_miss(mean, (sigma, sigma), 12.5)
    assert abs(p - mc) <= 4 * se + 1e-6


def test_quadrature_meets_rice_in_the_isotropic_limit() -> None:
    # The anisotropic path, with sigmas a hair apart, against scipy.stats.rice.
    for mean in [(4.0, -3.0), (0.0, 0.0), (9.0, 8.0), (20.0, 0.0)]:
        p = float(miss_probability(mean, (2.0, 2.0 * (1 + 1e-6)), 12.5)[0])
        ref = stats.rice.sf(12.5, math.hypot(*mean) / 2.0, scale=2.0)
        assert p == pytest.approx(ref, abs=1e-6)


@pytest.mark.parametrize(
    "mean, sigma",
    [((4.0, -3.0), (1.0, 4.0)), ((10.0, 2.0), (3.0, 0.5)), ((0.0, 11.0), (0.2, 2.5)),
     ((-6.0, 7.0), (2.0, 1.0))],
)
def test_anisotropic_miss_against_monte_carlo(
    mean: tuple[float, float], sigma: tuple[float, float]
) -> None:
    # reference: seeded Monte Carlo of a million draws of the 2-D normal.
    p = float(miss_probability(mean, sigma, 12.5)[0])
    mc, se = monte_carlo_miss(mean, sigma, 12.5)
    assert abs(p - mc) <= 4 * se + 1e-6


def test_miss_with_zero_sigma() -> None:
    p = miss_probability([[13.0, 0.0], [0.0, 12.0], [9.0, 9.0]], (0.0, 0.0), 12.5)
    assert p.tolist() == [1.0, 0.0, 1.0]
    # One axis known exactly: the other's normal tail beyond the chord.
    p_one = float(miss_probability((0.0, 5.0), (2.0, 0.0), 12.5)[0])
    chord = math.sqrt(12.5**2 - 25.0)
    assert p_one == pytest.approx(2 * stats.norm.sf(chord, scale=2.0), abs=1e-9)


@pytest.mark.parametrize("distance", [0.0, 5.0, 12.5, 14.0, 20.0, 30.0, 40.0, 47.4, 47.5, 60.0])
def test_overlap_area_against_shapely(distance: float) -> None:
    # reference: shapely's polygon intersection of two buffered points (the circles drawn with
    # 4096 segments, area good to about 1e-6 relative).
    from shapely.geometry import Point

    via = Point(distance, 0.0).buffer(17.5, quad_segs=1024)
    pad = Point(0.0, 0.0).buffer(30.0, quad_segs=1024)
    ref = via.intersection(pad).area
    got = float(overlap_area_um2(distance, 35.0, 60.0))
    assert got == pytest.approx(ref, rel=2e-5, abs=1e-3)


def test_resistance_ratio() -> None:
    full = math.pi * 17.5**2
    ratio = resistance_ratio([0.0, 12.5, 20.0, 50.0], 35.0, 60.0)
    assert ratio[0] == 1.0 and ratio[1] == 1.0
    assert ratio[2] == pytest.approx(full / float(overlap_area_um2(20.0, 35.0, 60.0)))
    assert ratio[2] > 1.0
    assert ratio[3] == math.inf


def test_interface_capture_figures() -> None:
    points = np.array([[-200.0, -200.0], [0.0, 0.0], [200.0, 200.0]])
    terms = np.array([2.0, 1.0, 0.05, 0.0, 0.0, 0.0, 0.0, 0.0])  # dx = 2 + 0.05 x, dy = 1
    geometry = ViaGeometry(35.0, 60.0)
    got = interface_capture(side="B", layer=5, terms=terms, sigma_um=(1.0, 1.0), leverage=0.25,
                            points_mm=points, vias=geometry)
    assert got.worst_at_mm == (200.0, 200.0)
    assert got.worst_um == pytest.approx(math.hypot(12.0, 1.0))
    assert got.model_se_um == pytest.approx(0.5)
    assert got.margin_um == 12.5
    assert got.overhang_um == pytest.approx(math.hypot(12.0, 1.0) - 12.5)
    s = math.sqrt(1.25)  # sigma^2 (1 + h): the scatter and the model's own uncertainty
    assert got.p_miss == pytest.approx(stats.rice.sf(12.5, math.hypot(12.0, 1.0) / s, scale=s))
    assert got.overlap_fraction == 1.0 and got.resistance_ratio == 1.0
    bare = interface_capture(side="B", layer=5, terms=terms, sigma_um=(1.0, 1.0), leverage=0.25,
                             points_mm=points, vias=None)
    assert bare.margin_um is None and bare.p_miss is None
    assert bare.worst_um == got.worst_um


def test_bad_input() -> None:
    with pytest.raises(OverlayInputError, match="sigma_um"):
        miss_probability((0.0, 0.0), (-1.0, 1.0), 12.5)
    with pytest.raises(OverlayInputError, match="margin_um"):
        miss_probability((0.0, 0.0), (1.0, 1.0), 0.0)
    with pytest.raises(OverlayInputError, match="mean_um"):
        miss_probability((0.0, 0.0, 1.0), (1.0, 1.0), 12.5)
    with pytest.raises(OverlayInputError, match="distance_um"):
        overlap_area_um2(math.inf, 35.0, 60.0)


@pytest.mark.parametrize("tiny", [1e-15, 1e-12, 1e-9, 1e-6])
def test_round_off_sigmas_act_as_known_offsets(tiny: float) -> None:
    # An exact fit leaves residual sigmas of float round-off: a via 1 um inside its margin does
    # not miss, one 1 um outside does.
    inside = miss_probability((14.0, 0.0), (2 * tiny, tiny), 15.0)[0]
    outside = miss_probability((16.0, 0.0), (2 * tiny, tiny), 15.0)[0]
    assert inside == pytest.approx(0.0, abs=1e-12) and outside == pytest.approx(1.0, abs=1e-12)


def test_capture_all_equals_one_at_a_time() -> None:
    rng = np.random.default_rng(4)
    points = rng.uniform(-230.0, 230.0, (25, 2))
    geometry = ViaGeometry(35.0, 65.0, {1: (50.0, 90.0)})
    faces = [("A", 1), ("A", 2), ("B", 1), ("B", 7)]
    terms = rng.normal(0.0, 1.0, (4, 8)) * np.array([6, 6, 0.01, 0.01, 0.01, 0.01, 1e-5, 1e-5])
    sigma = rng.uniform(0.5, 2.0, (4, 2))
    sigma[1, 1] = sigma[1, 0]  # one isotropic case among them
    leverage = rng.uniform(0.05, 0.9, 4)
    batch = capture_all(faces=faces, terms=terms, sigma_um=sigma, leverage=leverage,
                        points_mm=points, vias=geometry)
    for i, (side, layer) in enumerate(faces):
        one = interface_capture(side=side, layer=layer, terms=terms[i],
                                sigma_um=(float(sigma[i, 0]), float(sigma[i, 1])),
                                leverage=float(leverage[i]), points_mm=points, vias=geometry)
        assert batch[i] == one
    assert batch[0].margin_um == 20.0 and batch[3].margin_um == 15.0


def test_far_inside_the_bound_is_reported_and_holds() -> None:
    # Below 1e-6 the Rayleigh bound exp(-(m - |mu|)^2 / (2 s_max^2)) is reported; it must lie
    # above the exact value (2,048-node quadrature of the same integral as reference).
    import app.overlay.capture as capture

    mean, sigma = (3.0, 2.0), (1.0, 1.6)
    got = float(miss_probability(mean, sigma, 15.0)[0])
    bound = math.exp(-0.5 * ((15.0 - math.hypot(*mean)) / 1.6) ** 2)
    assert got == pytest.approx(bound, rel=1e-12) and got < 1e-6
    nodes = capture._NODES
    try:
        capture._NODES = np.polynomial.legendre.leggauss(2048)
        exact = 1.0 - float(capture._disc_mass(np.array([3.0]), np.array([1.0]),
                                               np.array([2.0]), np.array([1.6]),
                                               np.array([15.0]))[0])
    finally:
        capture._NODES = nodes
    assert exact <= got
