"""Probability that a normally distributed overlay vector falls outside a circle.

The length of a 2-D normal vector d ~ N(mean, cov) is Rice distributed when cov = s^2 I
(Rayleigh when the mean is also 0); for a general covariance its square is a generalized
chi-square, evaluated here by one-dimensional quadrature along a principal axis (conventions.md,
"Forecast and risk"). ``worst_point_exceedance`` handles many check points at once, where the
worst point of a panel depends jointly on the same uncertain terms, by seeded Monte Carlo.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from statistics import NormalDist
from typing import Final

import numpy as np
from scipy import integrate, stats

from app.overlay.errors import OverlayInputError
from app.overlay.model import N_TERMS, FloatArray, design_matrix

#: Relative tolerance for "cov is s^2 I" (the contract's isotropic test).
_ISOTROPIC_RTOL: Final = 1e-12
#: Eigenvalues below this fraction of the largest are round-off: that axis has no spread.
_SINGULAR_RTOL: Final = 1e-13
#: Symmetry and PSD tolerance on covariances, relative to their largest entry.
_COV_RTOL: Final = 1e-9
#: The principal-axis Gaussian is integrated over mean +/- this many sigma; outside it the
#: mass is below 1e-23 (normal tail at 10 sigma).
_SPAN_SIGMA: Final = 10.0
#: Samples held in memory at once (rows of the point array) to bound memory for large runs.
_CHUNK_VALUES: Final = 2_000_000


def _vector(name: str, values: object, size: int) -> FloatArray:
    a = np.asarray(values, dtype=np.float64)
    if a.shape != (size,):
        raise OverlayInputError(f"{name} must have shape ({size},), got {a.shape}")
    bad = np.flatnonzero(~np.isfinite(a))
    if bad.size:
        raise OverlayInputError(f"{name}[{int(bad[0])}] is not finite")
    return a


def _covariance(name: str, values: object, size: int) -> tuple[FloatArray, FloatArray]:
    """Validate a covariance (size, size); return its eigenvalues (>= 0) and eigenvectors."""
    c = np.asarray(values, dtype=np.float64)
    if c.shape != (size, size):
        raise OverlayInputError(f"{name} must have shape ({size}, {size}), got {c.shape}")
    bad = np.argwhere(~np.isfinite(c))
    if bad.size:
        raise OverlayInputError(f"{name}[{int(bad[0][0])}, {int(bad[0][1])}] is not finite")
    scale = float(np.abs(c).max())
    if np.abs(c - c.T).max() > _COV_RTOL * scale:
        raise OverlayInputError(f"{name} must be symmetric")
    w, vectors = np.linalg.eigh((c + c.T) / 2.0)
    if w.min() < -_COV_RTOL * scale:
        raise OverlayInputError(f"{name} must be positive semidefinite (eigenvalue {w.min()!r})")
    # Round-off can leave tiny negative eigenvalues on a PSD-singular matrix: they are zeros.
    w = np.where(w <= _SINGULAR_RTOL * scale, 0.0, w)
    return w, vectors


def _radius(r: float) -> float:
    if not np.isfinite(r) or r < 0.0:
        raise OverlayInputError(f"r must be a finite number >= 0, got {r!r}")
    return float(r)


def _outside_line(m_fixed: float, m_free: float, s_free: float, r: float) -> float:
    """P(|d| > r) when d has no spread along one axis (fixed at ``m_fixed``)."""
    if abs(m_fixed) >= r:
        return 1.0  # |d| >= |m_fixed| >= r, with equality only on a null set
    h = float(np.sqrt(r * r - m_fixed * m_fixed))
    return float(stats.norm.cdf((-h - m_free) / s_free) + stats.norm.sf((h - m_free) / s_free))


def _outside_general(m1: float, s1: float, m2: float, s2: float, r: float) -> float:
    """P(|d| > r) for independent principal components N(m1, s1^2), N(m2, s2^2), s1 <= s2.

    P(outside) = P(|u| > r) + int_{-r}^{r} N(u; m1, s1) [Phi((-h - m2)/s2) + Q((h - m2)/s2)] du,
    h = sqrt(r^2 - u^2). The outside probability is integrated directly, not as 1 - P(inside),
    so small exceedance probabilities keep their relative accuracy. The narrower component is
    the integration variable, so the quadrature sees a smooth integrand over a short span.
    """
    tails = float(stats.norm.cdf((-r - m1) / s1) + stats.norm.sf((r - m1) / s1))
    lo = max(-r, m1 - _SPAN_SIGMA * s1)
    hi = min(r, m1 + _SPAN_SIGMA * s1)
    if lo >= hi:
        return min(1.0, tails)

    def integrand(u: float) -> float:
        h = np.sqrt(max(r * r - u * u, 0.0))
        miss = stats.norm.cdf((-h - m2) / s2) + stats.norm.sf((h - m2) / s2)
        return float(stats.norm.pdf(u, loc=m1, scale=s1) * miss)

    inner, _ = integrate.quad(integrand, lo, hi, epsabs=1e-14, epsrel=1e-11, limit=200)
    return float(np.clip(tails + inner, 0.0, 1.0))


def p_outside_circle(mean: FloatArray, cov: FloatArray, r: float) -> float:
    """Probability that d ~ N(mean, cov) has length greater than r.

    Parameters
    ----------
    mean : array, shape (2,)
        Mean vector (um).
    cov : array, shape (2, 2)
        Covariance (um^2); symmetric positive semidefinite, may be singular.
    r : float
        Radius (um), >= 0.

    Returns
    -------
    float
        P(|d| > r) in [0, 1]. Isotropic cov: Rice survival function, exact. Otherwise
        quadrature along a principal axis. A zero-spread axis reduces to a line; no spread at
        all gives 0 or 1.
    """
    m = _vector("mean", mean, 2)
    w, vectors = _covariance("cov", cov, 2)
    radius = _radius(r)
    c = np.asarray(cov, dtype=np.float64)
    trace = float(c[0, 0] + c[1, 1])
    if trace <= 0.0 or w[1] <= 0.0:
        return 1.0 if float(np.hypot(m[0], m[1])) > radius else 0.0
    if (
        abs(c[0, 0] - c[1, 1]) <= _ISOTROPIC_RTOL * trace
        and abs(c[0, 1]) <= _ISOTROPIC_RTOL * trace
    ):
        s = float(np.sqrt(trace / 2.0))
        length = float(np.hypot(m[0], m[1]))
        if length == 0.0:
            return float(stats.rayleigh.sf(radius, scale=s))
        return float(np.clip(stats.rice.sf(radius, length / s, scale=s), 0.0, 1.0))
    # Principal axes: eigh sorts eigenvalues ascending, so component 0 is the narrower one.
    mp = vectors.T @ m
    if w[0] <= 0.0:
        return _outside_line(float(mp[0]), float(mp[1]), float(np.sqrt(w[1])), radius)
    return _outside_general(
        float(mp[0]), float(np.sqrt(w[0])), float(mp[1]), float(np.sqrt(w[1])), radius
    )


@dataclass(frozen=True)
class WorstPointExceedance:
    """Monte Carlo estimate that the worst check point exceeds a radius.

    Attributes
    ----------
    p_exceed : float
        Fraction of samples whose worst length over the points is greater than r.
    stderr : float
        Binomial standard error sqrt(p (1 - p) / n).
    n_samples : int
        Number of samples.
    worst_mean_um : float
        Mean over samples of the worst length.
    worst_band_um : tuple of float
        2.5 % and 97.5 % quantiles of the worst length.
    seed : int
        Seed of ``numpy.random.default_rng`` used.
    decided : bool
        Every threshold asked about lies outside p +/- z stderr at ``confidence`` (True when
        none was asked about).
    confidence : float
        Two-sided confidence of that decision.
    """

    p_exceed: float
    stderr: float
    n_samples: int
    worst_mean_um: float
    worst_band_um: tuple[float, float]
    seed: int
    decided: bool = True
    confidence: float = 0.95


def worst_point_exceedance(
    mean_terms: FloatArray,
    cov_terms: FloatArray,
    points_mm: FloatArray,
    r: float,
    *,
    point_sigma_um: tuple[float, float] = (0.0, 0.0),
    n_samples: int = 4000,
    seed: int = 0,
) -> WorstPointExceedance:
    """Probability that the longest FTB vector over the check points exceeds r.

    Parameters
    ----------
    mean_terms : array, shape (8,)
        Expected FTB term vector (panel frame, raw units).
    cov_terms : array, shape (8, 8)
        Its covariance; positive semidefinite, may be singular.
    points_mm : array, shape (P, 2)
        Check points, P >= 1.
    r : float
        Limit radius (um), >= 0.
    point_sigma_um : tuple of float
        Per-axis sigma of independent residual scatter added at each point.
    n_samples : int
        Monte Carlo samples, >= 1.
    seed : int
        Seed for ``numpy.random.default_rng``; the same seed gives the same result.

    Returns
    -------
    WorstPointExceedance
    """
    mean = _vector("mean_terms", mean_terms, N_TERMS)
    w, vectors = _covariance("cov_terms", cov_terms, N_TERMS)
    points = np.asarray(points_mm, dtype=np.float64)
    if points.ndim != 2 or points.shape[1] != 2 or points.shape[0] == 0:
        raise OverlayInputError(f"points_mm must have shape (P, 2), P >= 1, got {points.shape}")
    if not np.all(np.isfinite(points)):
        bad = np.argwhere(~np.isfinite(points))[0]
        raise OverlayInputError(f"points_mm[{int(bad[0])}, {int(bad[1])}] is not finite")
    radius = _radius(r)
    sx, sy = (float(s) for s in point_sigma_um)
    if not (np.isfinite(sx) and np.isfinite(sy) and sx >= 0.0 and sy >= 0.0):
        raise OverlayInputError(f"point_sigma_um must be finite and >= 0, got {point_sigma_um!r}")
    if isinstance(n_samples, bool) or not isinstance(n_samples, int | np.integer) or n_samples < 1:
        raise OverlayInputError(f"n_samples must be a positive integer, got {n_samples!r}")
    if isinstance(seed, bool) or not isinstance(seed, int | np.integer) or seed < 0:
        raise OverlayInputError(f"seed must be an integer >= 0, got {seed!r}")

    rng = np.random.default_rng(seed)
    # Eigen factor L = V sqrt(W): L L^T = cov even when cov is singular (zero eigenvalues).
    factor = vectors * np.sqrt(w)
    terms = mean + rng.standard_normal((n_samples, N_TERMS)) @ factor.T
    worst = _worst_lengths(terms, points, rng, (sx, sy))
    p = float(np.mean(worst > radius))
    lo, hi = np.quantile(worst, [0.025, 0.975])
    return WorstPointExceedance(
        p_exceed=p,
        stderr=float(np.sqrt(p * (1.0 - p) / n_samples)),
        n_samples=int(n_samples),
        worst_mean_um=float(worst.mean()),
        worst_band_um=(float(lo), float(hi)),
        seed=int(seed),
    )


def _worst_lengths(
    terms: FloatArray,
    points: FloatArray,
    rng: np.random.Generator,
    point_sigma_um: tuple[float, float] = (0.0, 0.0),
) -> FloatArray:
    """Longest vector over the points for each sampled term vector (n,)."""
    sx, sy = point_sigma_um
    n_points = points.shape[0]
    worst = np.empty(terms.shape[0])
    chunk = max(1, _CHUNK_VALUES // (2 * n_points))
    # Chunks bound memory only: the draws are taken in one sequence, so results do not depend
    # on the chunk size.
    # One matrix product per chunk: rows 0..P-1 of the design matrix give dx, P..2P-1 dy.
    design = design_matrix(points[:, 0], points[:, 1]).T
    for start in range(0, terms.shape[0], chunk):
        block = terms[start : start + chunk]
        values = block @ design
        dx, dy = values[:, :n_points], values[:, n_points:]
        if sx > 0.0 or sy > 0.0:
            noise = rng.standard_normal((block.shape[0], n_points, 2))
            dx = dx + sx * noise[..., 0]
            dy = dy + sy * noise[..., 1]
        worst[start : start + chunk] = np.sqrt(dx * dx + dy * dy).max(axis=1)
    return worst


#: A sampler draws n term vectors (n, 8) with the generator it is given.
Sampler = Callable[[np.random.Generator, int], FloatArray]


def adaptive_worst_point_exceedance(
    sampler: Sampler,
    points_mm: FloatArray,
    r: float,
    *,
    decide_at: tuple[float, ...] = (),
    confidence: float = 0.95,
    n_start: int = 500,
    n_max: int = 16000,
    seed: int = 0,
) -> WorstPointExceedance:
    """P(longest vector over the points > r) by seeded Monte Carlo whose size grows near a
    threshold.

    Starts with ``n_start`` samples and doubles the count until every threshold in
    ``decide_at`` lies outside p +/- z * stderr (z the two-sided normal quantile of
    ``confidence``), or ``n_max`` samples are drawn. The standard error is the binomial
    sqrt(p (1 - p) / n), floored at 1 / n so that p = 0 or 1 from few samples is not taken as
    exact. Far from every threshold a few hundred samples decide; at a threshold the count
    rises to ``n_max`` and ``decided`` is False.
    """
    points = np.asarray(points_mm, dtype=np.float64)
    if points.ndim != 2 or points.shape[1] != 2 or points.shape[0] == 0:
        raise OverlayInputError(f"points_mm must have shape (P, 2), P >= 1, got {points.shape}")
    radius = _radius(r)
    if not (0.0 < confidence < 1.0):
        raise OverlayInputError(f"confidence must be in (0, 1), got {confidence!r}")
    if n_start < 1 or n_max < n_start:
        raise OverlayInputError(f"need 1 <= n_start <= n_max, got {n_start}, {n_max}")
    z = NormalDist().inv_cdf(0.5 + confidence / 2.0)
    rng = np.random.default_rng(seed)
    parts: list[FloatArray] = []
    total = 0
    want = n_start
    while True:
        block = np.asarray(sampler(rng, want - total), dtype=np.float64)
        parts.append(_worst_lengths(block, points, rng))
        total = want
        worst = np.concatenate(parts)
        p = float(np.mean(worst > radius))
        stderr = float(np.sqrt(max(p * (1.0 - p), 1.0 / total) / total))
        decided = all(abs(p - t) > z * stderr for t in decide_at)
        if decided or total >= n_max:
            break
        want = min(2 * total, n_max)
    lo, hi = np.quantile(worst, [0.025, 0.975])
    return WorstPointExceedance(
        p_exceed=p,
        stderr=stderr,
        n_samples=total,
        worst_mean_um=float(worst.mean()),
        worst_band_um=(float(lo), float(hi)),
        seed=int(seed),
        decided=decided,
        confidence=confidence,
    )
