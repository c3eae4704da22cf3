"""Via capture: will a microvia of layer k land on its pad of layer k-1?

A via of diameter D_via lands on a pad of diameter D_pad. It is fully on its pad while the
layer-to-layer (L2L) offset d at its location has |d| <= m, the capture margin
m = (D_pad - D_via) / 2 (docs/conventions.md, "Vias, capture margin and connection resistance").

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
  the via area over the overlap area (first-order model, from memory, as docs/conventions.md says).

For a stacked-via connection through the build-up, each interface shifts the next via sideways
by that interface's offset, so the current takes an extra lateral path of about
sum_k |L2L_k(p)| through the pads: extra R ~ rho sum_k |L2L_k(p)| / (w_pad t_cu)
(``resistance.stacked_via``). It is a small figure beside the spread of plated copper
resistivity and thickness; it is reported with its magnitude, never used to hold a panel.

Units: um and mm as everywhere in the core; resistivity in ohm m, resistance in ohm.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace
from typing import Final

import numpy as np
from scipy import special, stats

from app.overlay.errors import OverlayInputError
from app.overlay.model import FloatArray, evaluate

#: Gauss-Legendre nodes for the disc quadrature of the anisotropic case. Over 3,000 random
#: cases (means within 25 um, sigmas 0.05 to 8 um per axis, margin 12.5 um) 64 nodes agree with
#: 2,048 to 7e-11 at worst (48 nodes: 5e-7); test_capture checks against a seeded Monte Carlo.
_NODES: Final = np.polynomial.legendre.leggauss(64)
#: Outer-variable window, in its own sigmas each side of the mean; beyond it the density is
#: below 1e-17 of its peak.
_WINDOW_SIGMAS: Final = 9.0
#: Outer sigma, as a share of the margin, below which the outer variable is taken as known:
#: the window would be too narrow for x = m sin(t) to resolve in floating point, and the mass
#: is then the inner normal's across the chord at the mean to well within 1e-9.
_KNOWN_OUTER: Final = 1e-6
#: Miss probabilities below this are reported as their Rayleigh upper bound, not computed.
_NEGLIGIBLE: Final = 1e-6
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


def miss_probability(mean_um: object, sigma_um: object, margin_um: object) -> FloatArray:
    """P(|d| > margin) for d ~ N(mean, diag(sigma_x^2, sigma_y^2)), per point.

    Parameters
    ----------
    mean_um : array, shape (P, 2) or (2,)
        Mean offset at each point (the fitted model), um.
    sigma_um : array, shape (P, 2) or (2,)
        Per-axis standard deviation at each point (>= 0), um.
    margin_um : float or array, shape (P,)
        Capture margin (> 0), um, for all points or for each.

    Returns
    -------
    array, shape (P,)
        Equal sigmas: the Rice tail ``scipy.stats.rice.sf(m, |mu|/s, scale=s)``. Otherwise
        1 - the normal's mass on the disc, by Gauss-Legendre quadrature over the axis with the
        smaller sigma (x = m sin t keeps the integrand smooth at the disc's edge) of the normal
        CDF difference across the chord on the other axis; where the Rayleigh bound
        exp(-(m - |mu|)^2 / (2 s_max^2)) is below 1e-6, that bound. Zero sigma on both axes: 1
        where |mu| > m, else 0.
    """
    mu = _as_points("mean_um", mean_um)
    sd = np.broadcast_to(_as_points("sigma_um", sigma_um), mu.shape)
    if np.any(sd < 0.0):
        raise OverlayInputError("sigma_um must be >= 0")
    m = np.broadcast_to(np.asarray(margin_um, dtype=np.float64), mu.shape[:1])
    if not (np.isfinite(m).all() and np.all(m > 0.0)):
        raise OverlayInputError(f"margin_um must be positive and finite, got {margin_um!r}")
    # Integrate over the axis with the smaller sigma: the window of its density holds all the
    # nodes, and the other axis's normal CDF across the chord is then smooth in it (the other
    # way round a small inner sigma makes that CDF a step the nodes cannot resolve).
    flip = sd[:, 1] < sd[:, 0]
    outer_mu = np.where(flip, mu[:, 1], mu[:, 0])
    inner_mu = np.where(flip, mu[:, 0], mu[:, 1])
    outer_sd = np.where(flip, sd[:, 1], sd[:, 0])
    inner_sd = np.where(flip, sd[:, 0], sd[:, 1])
    out = np.empty(mu.shape[0])

    still = inner_sd == 0.0  # the larger sigma is zero, so both are: the offset is known
    out[still] = (np.hypot(mu[still, 0], mu[still, 1]) > m[still]).astype(np.float64)
    iso = ~still & (np.abs(outer_sd - inner_sd) <= _ISOTROPIC_RTOL * inner_sd)
    if iso.any():
        s = inner_sd[iso]
        out[iso] = stats.rice.sf(m[iso], np.hypot(mu[iso, 0], mu[iso, 1]) / s, scale=s)
    rest = ~still & ~iso
    # Far inside the disc the quadrature is not needed: |e| <= s_max |z| for the error e about
    # the mean, so P(|d| > m) <= P(|e| > m - |mu|) <= exp(-(m - |mu|)^2 / (2 s_max^2)) (the
    # Rayleigh tail). Below _NEGLIGIBLE that bound is what is reported.
    reach = m - np.hypot(mu[:, 0], mu[:, 1])
    bound = np.ones_like(reach)
    bound[rest] = np.exp(-0.5 * np.square(np.maximum(reach[rest], 0.0) / inner_sd[rest]))
    far = rest & (reach > 0.0) & (bound < _NEGLIGIBLE)
    out[far] = bound[far]
    rest &= ~far
    if rest.any():
        out[rest] = 1.0 - _disc_mass(
            outer_mu[rest], outer_sd[rest], inner_mu[rest], inner_sd[rest], m[rest]
        )
    return np.clip(out, 0.0, 1.0)


def _disc_mass(
    mu_o: FloatArray, sd_o: FloatArray, mu_i: FloatArray, sd_i: FloatArray, m: FloatArray
) -> FloatArray:
    """Mass of independent normals (outer, inner) on discs of radius m; sd_o <= sd_i > 0."""
    known = sd_o <= _KNOWN_OUTER * m
    if known.any():
        out = np.empty(mu_o.shape)
        out[known] = _across(
            np.sqrt(np.maximum(m[known] ** 2 - mu_o[known] ** 2, 0.0)), mu_i[known], sd_i[known]
        )
        rest = ~known
        if rest.any():
            out[rest] = _disc_mass(mu_o[rest], sd_o[rest], mu_i[rest], sd_i[rest], m[rest])
        return out
    # Outer variable x over [-m, m] cut to its window, as x = m sin(t).
    lo = np.clip(mu_o - _WINDOW_SIGMAS * sd_o, -m, m)
    hi = np.clip(mu_o + _WINDOW_SIGMAS * sd_o, -m, m)
    t_lo, t_hi = np.arcsin(lo / m), np.arcsin(hi / m)
    nodes, weights = _NODES
    half = (t_hi - t_lo)[:, np.newaxis] / 2.0
    t = (t_lo + t_hi)[:, np.newaxis] / 2.0 + half * nodes
    x = m[:, np.newaxis] * np.sin(t)
    chord = m[:, np.newaxis] * np.cos(t)  # half-length of the disc's chord at x
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
    distance_um: object, via_diameter_um: object, pad_diameter_um: object
) -> FloatArray:
    """Area of the via bottom on its pad: circles of radii D_via/2, D_pad/2 at distance |d|.

    The lens area of two intersecting circles, r^2 acos((d^2 + r^2 - R^2) / (2 d r)) +
    R^2 acos((d^2 + R^2 - r^2) / (2 d R)) - sqrt((-d + r + R)(d + r - R)(d - r + R)(d + r + R))/2
    (standard geometry, from memory; checked against shapely in test_capture), pi r^2 while
    the via is inside the pad and 0 once they no longer touch. The diameters broadcast against
    ``distance_um``; returns um^2 in the broadcast shape.
    """
    via, pad = (np.asarray(v, dtype=np.float64) for v in (via_diameter_um, pad_diameter_um))
    if not (np.isfinite(via).all() and np.isfinite(pad).all() and np.all(via > 0.0)
            and np.all(via < pad)):
        raise OverlayInputError("overlap: need 0 < via diameter < pad diameter")
    d = np.abs(np.asarray(distance_um, dtype=np.float64))
    if not np.isfinite(d).all():
        raise OverlayInputError("distance_um must be finite")
    r, big = via / 2.0, pad / 2.0
    inside = d <= big - r
    apart = d >= big + r
    dd = np.where(inside | apart, big, d)  # any value that keeps the formula finite
    a1 = r**2 * np.arccos(np.clip((dd**2 + r**2 - big**2) / (2.0 * dd * r), -1.0, 1.0))
    a2 = big**2 * np.arccos(np.clip((dd**2 + big**2 - r**2) / (2.0 * dd * big), -1.0, 1.0))
    k = (-dd + r + big) * (dd + r - big) * (dd - r + big) * (dd + r + big)
    lens = a1 + a2 - 0.5 * np.sqrt(np.maximum(k, 0.0))
    return np.asarray(np.where(inside, np.pi * r**2, np.where(apart, 0.0, lens)))


def resistance_ratio(
    distance_um: object, via_diameter_um: object, pad_diameter_um: object
) -> FloatArray:
    """Contact resistance of a via at offset |d| relative to a fully landed one.

    First-order model (from memory; conventions.md): full via area / overlap area; 1 while the via
    is on its pad, ``inf`` once it no longer touches the pad (an open).
    """
    overlap = overlap_area_um2(distance_um, via_diameter_um, pad_diameter_um)
    full = np.pi * (np.asarray(via_diameter_um, dtype=np.float64) / 2.0) ** 2
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
    """Capture figures of one interface from its fit; see ``capture_all``."""
    return capture_all(
        faces=[(side, layer)], terms=np.asarray(terms, dtype=np.float64)[np.newaxis],
        sigma_um=np.asarray(sigma_um, dtype=np.float64)[np.newaxis],
        leverage=np.array([leverage], dtype=np.float64), points_mm=points_mm, vias=vias,
    )[0]


def capture_all(
    *,
    faces: Sequence[tuple[str, int]],
    terms: FloatArray,
    sigma_um: FloatArray,
    leverage: FloatArray,
    points_mm: FloatArray,
    vias: ViaGeometry | None,
) -> list[InterfaceCapture]:
    """Capture figures of K interfaces from their fits, all at once (see the module docstring).

    Parameters
    ----------
    faces : sequence of (side, layer), length K
    terms : array, shape (K, 8)
        Each layer's fitted terms, panel frame.
    sigma_um : array, shape (K, 2)
        Each fit's residual sigma per axis (>= 0).
    leverage : array, shape (K,)
        Each fit's largest leverage over the check points (>= 0).
    points_mm : array, shape (P, 2)
        Check points.
    vias : ViaGeometry or None
        Without it only the offsets and the fits' standard errors are given.
    """
    pts = _as_points("points_mm", points_mm)
    k = len(faces)
    t = np.asarray(terms, dtype=np.float64).reshape(k, 8)
    sd = np.asarray(sigma_um, dtype=np.float64).reshape(k, 2)
    h = np.asarray(leverage, dtype=np.float64).reshape(k)
    if not (np.isfinite(sd).all() and np.all(sd >= 0.0)):
        raise OverlayInputError("sigma_um must be finite values >= 0")
    if not (np.isfinite(h).all() and np.all(h >= 0.0)):
        raise OverlayInputError("leverage must be finite and >= 0")
    dx, dy = evaluate(t, pts[:, 0], pts[:, 1])  # (K, P) each
    length = np.hypot(dx, dy)
    worst = length.argmax(axis=1)
    rows = np.arange(k)
    worst_um = length[rows, worst]
    se = sd.max(axis=1) * np.sqrt(h)
    out = [
        InterfaceCapture(side=side, layer=layer, worst_um=float(worst_um[i]),
                         worst_at_mm=(float(pts[worst[i], 0]), float(pts[worst[i], 1])),
                         model_se_um=float(se[i]))
        for i, (side, layer) in enumerate(faces)
    ]
    if vias is None or k == 0:
        return out
    pairs = np.array([vias.diameters(layer) for _, layer in faces]).reshape(k, 2)
    margin = (pairs[:, 1] - pairs[:, 0]) / 2.0
    n = pts.shape[0]
    p = miss_probability(
        np.stack([dx.ravel(), dy.ravel()], axis=-1),
        np.repeat(sd * np.sqrt(1.0 + h)[:, np.newaxis], n, axis=0),
        np.repeat(margin, n),
    ).reshape(k, n)
    at = p.argmax(axis=1)
    overlap = overlap_area_um2(worst_um, pairs[:, 0], pairs[:, 1])
    full = np.pi * (pairs[:, 0] / 2.0) ** 2
    with np.errstate(divide="ignore"):
        ratio = np.where(overlap > 0.0, full / np.maximum(overlap, 1e-300), np.inf)
    return [
        replace(
            c, margin_um=float(margin[i]), p_miss=float(p[i, at[i]]),
            p_miss_at_mm=(float(pts[at[i], 0]), float(pts[at[i], 1])),
            overhang_um=c.worst_um - float(margin[i]),
            overlap_fraction=float(overlap[i] / full[i]), resistance_ratio=float(ratio[i]),
        )
        for i, c in enumerate(out)
    ]
