"""Via capture: will a microvia of layer k land on its pad of layer k-1?

A via of diameter D_via lands on a pad of diameter D_pad. It is fully on its pad while the
layer-to-layer (L2L) offset d at its location has |d| <= m, the capture margin
m = (D_pad - D_via) / 2 (DOMAIN.md, "Vias, capture margin and connection resistance").

Per interface (layer k on layer k-1, one side), at each check point p:

- the offset d(p) is the layer's fitted model at p plus the local scatter about it, taken as
  normal with per-axis variance sigma^2 (1 + h): sigma^2 is the fit's residual variance (the
  scatter a via at p sees, metrology noise included, so on the safe side) and sigma^2 h the
  model's own uncertainty at p, h being the fit's largest leverage over the check points
  (``fit.OverlayFit.leverage``; ordinary least squares, the prediction variance of a new
  observation, as statsmodels' ``get_prediction`` gives it);
- P(|d| > m), the chance that a via there misses part of its pad: for equal variances a Rice
  tail, ``scipy.stats.rice.sf(m, |mu|/s, scale=s)``; otherwise a one-dimensional quadrature of
  the normal over the disc (``miss_probability``);
- when the fitted offset passes the margin, the via bottom's overlap with the pad: the
  intersection of circles of radii D_via/2 and D_pad/2 at centre distance |d|
  (``overlap_area_um2``), and the contact resistance relative to a fully landed via, roughly
  the via area over the overlap area (first-order model, from memory, as DOMAIN.md says).

For a stacked-via connection through the build-up, each interface shifts the next via sideways
by that interface's offset, so the current takes an extra lateral path of about
sum_k |L2L_k(p)| through the pads: extra R ~ rho sum_k |L2L_k(p)| / (w_pad t_cu)
(``resistance.stacked_via``). It is a small figure beside the spread of plated copper
resistivity and thickness; it is reported with its magnitude, never used to hold a panel.

Units: um and mm as everywhere in the core; resistivity in ohm m, resistance in ohm.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Final

import numpy as np
from scipy import special, stats

from app.overlay.errors import OverlayInputError
from app.overlay.model import FloatArray, evaluate

#: Gauss-Legendre nodes for the disc quadrature of the anisotropic case. The outer variable runs
#: over at most 18 of its own sigmas, so 256 nodes put a dozen per sigma: the probability is good
#: to about 1e-8 against a seeded Monte Carlo of a million draws (test_capture).
_NODES: Final = np.polynomial.legendre.leggauss(256)
#: Outer-variable window, in its own sigmas each side of the mean; beyond it the density is
#: below 1e-17 of its peak.
_WINDOW_SIGMAS: Final = 9.0
#: Outer sigma, as a share of the margin, below which the outer variable is taken as known:
#: the window would be too narrow for x = m sin(t) to resolve in floating point, and the mass
#: is then the inner normal's across the chord at the mean to well within 1e-9.
_KNOWN_OUTER: Final = 1e-6
#: Relative difference of the two sigmas below which the Rice formula is used.
_ISOTROPIC_RTOL: Final = 1e-9


@dataclass(frozen=True)
class ViaGeometry:
    """Via and pad diameters of a product, with per-layer exceptions.

    Attributes
    ----------
    via_diameter_um, pad_diameter_um : float
        The usual pair; pad > via > 0.
    per_layer : mapping of int to (float, float)
        Layer k -> (via, pad) where layer k's vias (landing on layer k-1's pads) differ.
    """

    via_diameter_um: float
    pad_diameter_um: float
    per_layer: Mapping[int, tuple[float, float]] = field(default_factory=dict)

    def __post_init__(self) -> None:
        _check_pair("the default", self.via_diameter_um, self.pad_diameter_um)
        for layer, (via, pad) in self.per_layer.items():
            _check_pair(f"layer {layer}", via, pad)

    def diameters(self, layer: int) -> tuple[float, float]:
        """(via, pad) diameters for the vias of ``layer``, um."""
        return self.per_layer.get(layer, (self.via_diameter_um, self.pad_diameter_um))

    def margin_um(self, layer: int) -> float:
        """Capture margin (D_pad - D_via) / 2 of ``layer``'s vias, um."""
        via, pad = self.diameters(layer)
        return capture_margin_um(via, pad)


def _check_pair(where: str, via: float, pad: float) -> None:
    if not (math.isfinite(via) and math.isfinite(pad) and 0.0 < via < pad):
        raise OverlayInputError(
            f"{where}: need 0 < via diameter < pad diameter, got via {via!r} um, pad {pad!r} um"
        )


def capture_margin_um(via_diameter_um: float, pad_diameter_um: float) -> float:
    """Capture margin m = (D_pad - D_via) / 2, um.

    Raises
    ------
    OverlayInputError
        Unless 0 < via < pad, both finite.
    """
    _check_pair("capture margin", via_diameter_um, pad_diameter_um)
    return (pad_diameter_um - via_diameter_um) / 2.0


def _as_points(name: str, values: object) -> FloatArray:
    a = np.asarray(values, dtype=np.float64)
    if a.ndim == 1:
        a = a[np.newaxis]
    if a.ndim != 2 or a.shape[1] != 2:
        raise OverlayInputError(f"{name} must have shape (P, 2) or (2,), got {a.shape}")
    if not np.isfinite(a).all():
        raise OverlayInputError(f"{name} must be finite")
    return a


def miss_probability(mean_um: object, sigma_um: object, margin_um: float) -> FloatArray:
    """P(|d| > margin) for d ~ N(mean, diag(sigma_x^2, sigma_y^2)), per point.

    Parameters
    ----------
    mean_um : array, shape (P, 2) or (2,)
        Mean offset at each point (the fitted model), um.
    sigma_um : array, shape (P, 2) or (2,)
        Per-axis standard deviation at each point (>= 0), um.
    margin_um : float
        Capture margin (> 0), um.

    Returns
    -------
    array, shape (P,)
        Equal sigmas: the Rice tail ``scipy.stats.rice.sf(m, |mu|/s, scale=s)``. Otherwise
        1 - the normal's mass on the disc, by Gauss-Legendre quadrature over the axis with the
        larger sigma (x = m sin t keeps the integrand smooth at the disc's edge) of the normal
        CDF difference across the chord on the other axis. Zero sigma on both axes: 1 where
        |mu| > m, else 0.
    """
    mu = _as_points("mean_um", mean_um)
    sd = np.broadcast_to(_as_points("sigma_um", sigma_um), mu.shape)
    if np.any(sd < 0.0):
        raise OverlayInputError("sigma_um must be >= 0")
    m = float(margin_um)
    if not (math.isfinite(m) and m > 0.0):
        raise OverlayInputError(f"margin_um must be positive and finite, got {margin_um!r}")
    # Integrate over the axis with the larger sigma: its density is the broad one.
    flip = sd[:, 1] > sd[:, 0]
    outer_mu = np.where(flip, mu[:, 1], mu[:, 0])
    inner_mu = np.where(flip, mu[:, 0], mu[:, 1])
    outer_sd = np.where(flip, sd[:, 1], sd[:, 0])
    inner_sd = np.where(flip, sd[:, 0], sd[:, 1])
    out = np.empty(mu.shape[0])

    still = outer_sd == 0.0  # both zero: the offset is known
    out[still] = (np.hypot(mu[still, 0], mu[still, 1]) > m).astype(np.float64)
    iso = ~still & (np.abs(outer_sd - inner_sd) <= _ISOTROPIC_RTOL * outer_sd)
    if iso.any():
        s = outer_sd[iso]
        out[iso] = stats.rice.sf(m, np.hypot(mu[iso, 0], mu[iso, 1]) / s, scale=s)
    rest = ~still & ~iso
    if rest.any():
        out[rest] = 1.0 - _disc_mass(
            outer_mu[rest], outer_sd[rest], inner_mu[rest], inner_sd[rest], m
        )
    return np.clip(out, 0.0, 1.0)


def _disc_mass(
    mu_o: FloatArray, sd_o: FloatArray, mu_i: FloatArray, sd_i: FloatArray, m: float
) -> FloatArray:
    """Mass of independent normals (outer, inner) on the disc of radius m; sd_o > 0."""
    known = sd_o <= _KNOWN_OUTER * m
    if known.any():
        out = np.empty(mu_o.shape)
        out[known] = _across(
            np.sqrt(np.maximum(m * m - mu_o[known] ** 2, 0.0)), mu_i[known], sd_i[known]
        )
        if (~known).any():
            out[~known] = _disc_mass(mu_o[~known], sd_o[~known], mu_i[~known], sd_i[~known], m)
        return out
    # Outer variable x over [-m, m] cut to its window, as x = m sin(t).
    lo = np.clip(mu_o - _WINDOW_SIGMAS * sd_o, -m, m)
    hi = np.clip(mu_o + _WINDOW_SIGMAS * sd_o, -m, m)
    t_lo, t_hi = np.arcsin(lo / m), np.arcsin(hi / m)
    nodes, weights = _NODES
    half = (t_hi - t_lo)[:, np.newaxis] / 2.0
    t = (t_lo + t_hi)[:, np.newaxis] / 2.0 + half * nodes
    x = m * np.sin(t)
    chord = m * np.cos(t)  # half-length of the disc's chord at x
    density = np.exp(-0.5 * ((x - mu_o[:, np.newaxis]) / sd_o[:, np.newaxis]) ** 2) / (
        sd_o[:, np.newaxis] * math.sqrt(2.0 * math.pi)
    )
    across = _across(chord, mu_i[:, np.newaxis], sd_i[:, np.newaxis])
    return np.asarray((weights * density * across * chord).sum(axis=1) * half[:, 0])


def _across(chord: FloatArray, mu: FloatArray, sd: FloatArray) -> FloatArray:
    """Mass of N(mu, sd^2) on [-chord, chord]; sd may be 0 (then 1 or 0)."""
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.asarray(np.where(
            sd > 0.0,
            special.ndtr((chord - mu) / sd) - special.ndtr((-chord - mu) / sd),
            (np.abs(mu) <= chord).astype(np.float64),
        ))


def overlap_area_um2(
    distance_um: object, via_diameter_um: float, pad_diameter_um: float
) -> FloatArray:
    """Area of the via bottom on its pad: circles of radii D_via/2, D_pad/2 at distance |d|.

    The lens area of two intersecting circles, r^2 acos((d^2 + r^2 - R^2) / (2 d r)) +
    R^2 acos((d^2 + R^2 - r^2) / (2 d R)) - sqrt((-d + r + R)(d + r - R)(d - r + R)(d + r + R))/2
    (standard geometry, from memory; checked against shapely in test_capture), pi r^2 while
    the via is inside the pad and 0 once they no longer touch. Returns um^2, shape of
    ``distance_um``.
    """
    _check_pair("overlap", via_diameter_um, pad_diameter_um)
    d = np.abs(np.asarray(distance_um, dtype=np.float64))
    if not np.isfinite(d).all():
        raise OverlayInputError("distance_um must be finite")
    r, big = via_diameter_um / 2.0, pad_diameter_um / 2.0
    inside = d <= big - r
    apart = d >= big + r
    dd = np.where(inside | apart, big, d)  # any value that keeps the formula finite
    a1 = r**2 * np.arccos(np.clip((dd**2 + r**2 - big**2) / (2.0 * dd * r), -1.0, 1.0))
    a2 = big**2 * np.arccos(np.clip((dd**2 + big**2 - r**2) / (2.0 * dd * big), -1.0, 1.0))
    k = (-dd + r + big) * (dd + r - big) * (dd - r + big) * (dd + r + big)
    lens = a1 + a2 - 0.5 * np.sqrt(np.maximum(k, 0.0))
    return np.asarray(np.where(inside, math.pi * r**2, np.where(apart, 0.0, lens)))


def resistance_ratio(
    distance_um: object, via_diameter_um: float, pad_diameter_um: float
) -> FloatArray:
    """Contact resistance of a via at offset |d| relative to a fully landed one.

    First-order model (from memory, DOMAIN.md): full via area / overlap area; 1 while the via is
    on its pad, ``inf`` once it no longer touches the pad (an open).
    """
    overlap = overlap_area_um2(distance_um, via_diameter_um, pad_diameter_um)
    full = math.pi * (via_diameter_um / 2.0) ** 2
    with np.errstate(divide="ignore"):
        return np.asarray(np.where(overlap > 0.0, full / np.maximum(overlap, 1e-300), np.inf))


@dataclass(frozen=True)
class InterfaceCapture:
    """How the vias of one layer and side land on the pads beneath, at the check points.

    Attributes
    ----------
    side : str
    layer : int
    worst_um : float
        Largest fitted L2L offset over the check points, um.
    worst_at_mm : tuple of float
        Where it is.
    model_se_um : float
        Bound on the fit's own standard error at the check points, sigma_max sqrt(h), um.
    margin_um : float or None
        Capture margin of this layer's vias; None without via settings.
    p_miss : float or None
        Largest P(|d| > m) over the check points.
    p_miss_at_mm : tuple of float or None
        Where it is.
    overhang_um : float or None
        worst_um - margin_um: how far the worst via runs past its pad edge (> 0) or its
        clearance to it (<= 0).
    overlap_fraction : float or None
        Share of the via bottom on its pad at the worst point (1 while on the pad).
    resistance_ratio : float or None
        Via area / overlap there (first-order); ``inf`` for a via off its pad entirely.
    """

    side: str
    layer: int
    worst_um: float
    worst_at_mm: tuple[float, float]
    model_se_um: float
    margin_um: float | None = None
    p_miss: float | None = None
    p_miss_at_mm: tuple[float, float] | None = None
    overhang_um: float | None = None
    overlap_fraction: float | None = None
    resistance_ratio: float | None = None


def interface_capture(
    *,
    side: str,
    layer: int,
    terms: FloatArray,
    sigma_um: tuple[float, float],
    leverage: float,
    points_mm: FloatArray,
    vias: ViaGeometry | None,
) -> InterfaceCapture:
    """Capture figures of one interface from its fit (see the module docstring).

    Parameters
    ----------
    terms : array, shape (8,)
        The layer's fitted terms, panel frame.
    sigma_um : (float, float)
        The fit's residual sigma per axis.
    leverage : float
        The fit's largest leverage over the check points (>= 0).
    points_mm : array, shape (P, 2)
        Check points.
    vias : ViaGeometry or None
        Without it only the offset and the fit's standard error are given.
    """
    pts = _as_points("points_mm", points_mm)
    sd = np.asarray(sigma_um, dtype=np.float64)
    if sd.shape != (2,) or not np.isfinite(sd).all() or np.any(sd < 0.0):
        raise OverlayInputError(f"sigma_um must be two finite values >= 0, got {sigma_um!r}")
    h = float(leverage)
    if not (math.isfinite(h) and h >= 0.0):
        raise OverlayInputError(f"leverage must be finite and >= 0, got {leverage!r}")
    dx, dy = evaluate(np.asarray(terms, dtype=np.float64), pts[:, 0], pts[:, 1])
    length = np.hypot(dx, dy)
    i = int(length.argmax())
    at = (float(pts[i, 0]), float(pts[i, 1]))
    base = InterfaceCapture(
        side=side, layer=layer, worst_um=float(length[i]), worst_at_mm=at,
        model_se_um=float(sd.max() * math.sqrt(h)),
    )
    if vias is None:
        return base
    via, pad = vias.diameters(layer)
    m = capture_margin_um(via, pad)
    p = miss_probability(np.stack([dx, dy], axis=-1), sd * math.sqrt(1.0 + h), m)
    j = int(p.argmax())
    overlap = float(overlap_area_um2(length[i], via, pad)) / (math.pi * (via / 2.0) ** 2)
    return InterfaceCapture(
        side=side, layer=layer, worst_um=base.worst_um, worst_at_mm=at,
        model_se_um=base.model_se_um, margin_um=m, p_miss=float(p[j]),
        p_miss_at_mm=(float(pts[j, 0]), float(pts[j, 1])), overhang_um=base.worst_um - m,
        overlap_fraction=overlap, resistance_ratio=float(resistance_ratio(length[i], via, pad)),
    )
