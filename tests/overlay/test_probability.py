"""Exceedance probabilities against scipy references, closed forms and seeded Monte Carlo."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import integrate, stats

from app.overlay.errors import OverlayInputError
from app.overlay.model import design_matrix
from app.overlay.probability import p_outside_circle, worst_point_exceedance


def monte_carlo(mean: np.ndarray, cov: np.ndarray, r: float, n: int, seed: int) -> float:
    draws = np.random.default_rng(seed).multivariate_normal(mean, cov, size=n)
    return float(np.mean(np.hypot(draws[:, 0], draws[:, 1]) > r))


def dblquad_outside(mean: np.ndarray, cov: np.ndarray, r: float) -> float:
    """1 - integral of the bivariate normal pdf over the disk, in polar coordinates."""
    pdf = stats.multivariate_normal(mean, cov).pdf
    inside, _ = integrate.dblquad(
        lambda rho, theta: pdf([rho * np.cos(theta), rho * np.sin(theta)]) * rho,
        0.0,
        2.0 * np.pi,
        0.0,
        r,
        epsabs=1e-12,
        epsrel=1e-10,
    )
    return 1.0 - inside


@pytest.mark.parametrize(
    "mean, s, r",
    [
        ((0.0, 0.0), 2.0, 3.0),
        ((3.0, 4.0), 1.5, 6.0),
        ((30.0, -10.0), 8.0, 60.0),
        ((1.0, 0.0), 1.0, 0.0),
        ((0.0, 0.0), 1.0, 10.0),
    ],
)
def test_isotropic_is_rice(mean: tuple[float, float], s: float, r: float) -> None:
    m = np.array(mean)
    p = p_outside_circle(m, s * s * np.eye(2), r)
    # reference: scipy.stats.rice.sf(r, |mean|/s, scale=s); for mean = 0 scipy.stats.rayleigh.sf
    # (rice.sf with b = 0 underflows to 0 at 10 sigma, where exp(-50) = 1.9e-22 is still exact)
    length = float(np.hypot(*m))
    if length == 0.0:
        ref = stats.rayleigh.sf(r, scale=s)
        assert ref == pytest.approx(np.exp(-(r**2) / (2 * s * s)), rel=1e-12)
    else:
        ref = stats.rice.sf(r, length / s, scale=s)
    assert p == pytest.approx(ref, rel=1e-12, abs=1e-300)
    if r > 0 and 1e-3 < p < 1 - 1e-3:
        mc = monte_carlo(m, s * s * np.eye(2), r, 200_000, seed=1)
        assert abs(mc - p) < 5 * np.sqrt(p * (1 - p) / 200_000)


def test_non_isotropic_reference_case() -> None:
    mean = np.array([3.0, 4.0])
    cov = np.array([[4.0, 1.5], [1.5, 1.0]])
    p = p_outside_circle(mean, cov, 6.0)
    assert p == pytest.approx(0.308, abs=5e-4)
    # reference: scipy.integrate.dblquad of scipy.stats.multivariate_normal.pdf over the disk
    assert p == pytest.approx(dblquad_outside(mean, cov, 6.0), abs=1e-8)
    # reference: seeded Monte Carlo of 10^6 draws, within 4 binomial standard errors
    n = 1_000_000
    mc = monte_carlo(mean, cov, 6.0, n, seed=2024)
    assert abs(mc - p) < 4 * np.sqrt(p * (1 - p) / n)


@pytest.mark.parametrize(
    "mean, cov, r",
    [
        ((0.0, 0.0), [[9.0, 0.0], [0.0, 1.0]], 4.0),
        ((-2.0, 1.0), [[1.0, -0.9], [-0.9, 1.0]], 2.5),
        ((10.0, 0.0), [[4.0, 0.0], [0.0, 0.04]], 9.0),  # narrow across, tail case
        ((0.5, 0.5), [[0.01, 0.0], [0.0, 25.0]], 1.0),
    ],
)
def test_general_covariance_against_dblquad(
    mean: tuple[float, float], cov: list[list[float]], r: float
) -> None:
    m, c = np.array(mean), np.array(cov)
    # reference: scipy.integrate.dblquad of scipy.stats.multivariate_normal.pdf over the disk
    assert p_outside_circle(m, c, r) == pytest.approx(dblquad_outside(m, c, r), abs=1e-7)


def test_small_exceedance_keeps_relative_accuracy() -> None:
    # Far inside: the outside probability is tiny and is integrated directly, not as 1 - P(in).
    mean, cov = np.zeros(2), np.array([[1.0, 0.3], [0.3, 0.5]])
    p = p_outside_circle(mean, cov, 9.0)
    # reference: the isotropic bound with the larger principal sigma, scipy.stats.rayleigh.sf
    s_max = float(np.sqrt(np.linalg.eigvalsh(cov).max()))
    assert 0.0 < p < stats.rayleigh.sf(9.0, scale=s_max)
    assert p > 1e-40


@pytest.mark.parametrize("k, covered", [(3.0, 0.9889), (3.44, 0.9973)])
def test_rayleigh_coverage(k: float, covered: float) -> None:
    # docs/conventions.md: a 3-sigma radius covers only 98.89 %, the 99.73 % radius is 3.44 sigma.
    s = 2.5
    inside = 1.0 - p_outside_circle(np.zeros(2), s * s * np.eye(2), k * s)
    # reference: Rayleigh closed form P(|d| <= k s) = 1 - exp(-k^2 / 2)
    assert inside == pytest.approx(1.0 - np.exp(-k * k / 2.0), rel=1e-12)
    assert inside == pytest.approx(covered, abs=5e-5)


def test_singular_covariances() -> None:
    # Spread along x only: |d| > r  <=>  |x| > sqrt(r^2 - my^2).
    mean, cov = np.array([1.0, 3.0]), np.array([[4.0, 0.0], [0.0, 0.0]])
    h = np.sqrt(25.0 - 9.0)
    # reference: scipy.stats.norm two-sided tail
    expected = stats.norm.cdf((-h - 1.0) / 2.0) + stats.norm.sf((h - 1.0) / 2.0)
    assert p_outside_circle(mean, cov, 5.0) == pytest.approx(expected, rel=1e-12)
    assert p_outside_circle(np.array([0.0, 6.0]), cov, 5.0) == 1.0  # line misses the disk
    # Rotated line: same answer in any orientation.
    rot = np.array([[0.6, -0.8], [0.8, 0.6]])
    assert p_outside_circle(rot @ mean, rot @ cov @ rot.T, 5.0) == pytest.approx(expected, rel=1e-9)
    # No spread at all: deterministic.
    assert p_outside_circle(np.array([3.0, 4.0]), np.zeros((2, 2)), 4.9) == 1.0
    assert p_outside_circle(np.array([3.0, 4.0]), np.zeros((2, 2)), 5.1) == 0.0


@pytest.mark.parametrize(
    "mean, cov, r, message",
    [
        ((0.0, np.nan), np.eye(2), 1.0, r"mean\[1\] is not finite"),
        ((0.0, 0.0), [[1.0, 0.0], [0.0, np.inf]], 1.0, r"cov\[1, 1\] is not finite"),
        ((0.0, 0.0), [[1.0, 0.5], [0.0, 1.0]], 1.0, "symmetric"),
        ((0.0, 0.0), [[1.0, 2.0], [2.0, 1.0]], 1.0, "positive semidefinite"),
        ((0.0, 0.0), np.eye(3), 1.0, "shape"),
        ((0.0, 0.0), np.eye(2), -1.0, "r must be"),
    ],
)
def test_bad_input(mean: tuple[float, float], cov: object, r: float, message: str) -> None:
    with pytest.raises(OverlayInputError, match=message):
        p_outside_circle(np.array(mean), np.asarray(cov), r)


# ------------------------------------------------------------------------------ worst point


def random_cov(seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    sd = np.array([4.0, 4.0, 0.01, 0.01, 0.01, 0.01, 2e-5, 2e-5])
    a = rng.normal(size=(8, 8))
    corr = a @ a.T
    corr /= np.sqrt(np.outer(np.diag(corr), np.diag(corr)))
    return corr * np.outer(sd, sd)


MEAN_TERMS = np.array([5.0, -3.0, 0.01, 0.005, -0.004, 0.002, 1e-5, 0.0])


def test_one_point_matches_p_outside_circle() -> None:
    cov = random_cov(1)
    point = np.array([[120.0, -80.0]])
    result = worst_point_exceedance(MEAN_TERMS, cov, point, 12.0, n_samples=200_000, seed=5)
    # The FTB vector at one point is linear in the terms: d = J t with J the design rows.
    j = design_matrix(point[:, 0], point[:, 1])
    p = p_outside_circle(j @ MEAN_TERMS, j @ cov @ j.T, 12.0)
    assert abs(result.p_exceed - p) < 4 * max(result.stderr, 1e-4)
    assert result.stderr == pytest.approx(np.sqrt(p * (1 - p) / 200_000), rel=0.05)


def test_point_sigma_adds_scatter() -> None:
    # Mean only (cov 0) plus isotropic scatter at one point: a Rice distribution.
    point = np.array([[0.0, 0.0]])
    mean = np.zeros(8)
    mean[:2] = (3.0, 4.0)
    result = worst_point_exceedance(
        mean, np.zeros((8, 8)), point, 6.0, point_sigma_um=(1.5, 1.5), n_samples=100_000, seed=3
    )
    # reference: scipy.stats.rice.sf(r, |mean|/s, scale=s)
    p = stats.rice.sf(6.0, 5.0 / 1.5, scale=1.5)
    assert abs(result.p_exceed - p) < 4 * result.stderr


def test_many_points_at_least_the_largest_single_point() -> None:
    cov = random_cov(2)
    points = np.array([[x, y] for x in (-200.0, 0.0, 200.0) for y in (-200.0, 0.0, 200.0)])
    result = worst_point_exceedance(MEAN_TERMS, cov, points, 15.0, n_samples=50_000, seed=8)
    singles = []
    for p in points:
        j = design_matrix(p[:1], p[1:])
        singles.append(p_outside_circle(j @ MEAN_TERMS, j @ cov @ j.T, 15.0))
    assert result.p_exceed >= max(singles) - 4 * result.stderr
    assert result.worst_band_um[0] <= result.worst_mean_um <= result.worst_band_um[1]


def test_seeded_reproducibility_and_psd_singular_cov() -> None:
    # A rank-2 covariance (translation only) is PSD-singular; it must still be sampled.
    cov = np.zeros((8, 8))
    cov[:2, :2] = [[4.0, 1.0], [1.0, 2.0]]
    points = np.array([[0.0, 0.0], [100.0, 100.0]])
    first = worst_point_exceedance(MEAN_TERMS, cov, points, 8.0, point_sigma_um=(1, 2), seed=42)
    again = worst_point_exceedance(MEAN_TERMS, cov, points, 8.0, point_sigma_um=(1, 2), seed=42)
    other = worst_point_exceedance(MEAN_TERMS, cov, points, 8.0, point_sigma_um=(1, 2), seed=43)
    assert first == again
    assert first != other
    assert first.seed == 42 and first.n_samples == 4000
    assert 0.0 <= first.p_exceed <= 1.0 and np.isfinite(first.stderr)


def test_worst_point_bad_input() -> None:
    points = np.zeros((1, 2))
    with pytest.raises(OverlayInputError, match="positive semidefinite"):
        worst_point_exceedance(np.zeros(8), -np.eye(8), points, 1.0)
    with pytest.raises(OverlayInputError, match="points_mm"):
        worst_point_exceedance(np.zeros(8), np.eye(8), np.zeros((0, 2)), 1.0)
    with pytest.raises(OverlayInputError, match="n_samples"):
        worst_point_exceedance(np.zeros(8), np.eye(8), points, 1.0, n_samples=0)
    with pytest.raises(OverlayInputError, match="point_sigma_um"):
        worst_point_exceedance(np.zeros(8), np.eye(8), points, 1.0, point_sigma_um=(-1.0, 0.0))
    with pytest.raises(OverlayInputError, match=r"mean_terms\[2\]"):
        worst_point_exceedance(np.array([0, 0, np.nan, 0, 0, 0, 0, 0.0]), np.eye(8), points, 1.0)
