"""Least-squares fit of the per-layer overlay model to one measurement or to many at once.

The model (see ``model``) splits into two independent regressions on the same basis::

    dx = Tx*1 + Sx*x + (-Ox)*y + Kx*xy
    dy = Ty*1 + Oy*x +   Sy*y  + Ky*xy

so a fit is one ordinary least-squares solve of the basis ``[1, x, y, xy]`` (trapezoid),
``[1, x, y]`` (linear) or ``[1]`` (translation) against two right-hand sides, dx and dy. The
number of terms acting on one axis is therefore 4, 3 or 1; that is the ``p`` in the residual
degrees of freedom ``n - p``.

The numerics (normalisation, the rank rule and fallback, the solves, re-expansion about the
panel centre) live in ``_lsq``. ``fit_measurement`` solves one measurement with
``numpy.linalg.lstsq``; ``fit_many`` groups measurements by site count, and within a group lets
measurements with the same site layout share one solve operator and orthogonalises the others
all at once. Both apply the same rank rule, so they pick the same model and agree to round-off.
"""

from __future__ import annotations

import gc
from collections import deque
from collections.abc import Iterable
from dataclasses import dataclass, fields
from itertools import repeat
from typing import Final

import numpy as np
from numpy.typing import NDArray

from app.overlay import _lsq
from app.overlay.errors import OverlayInputError
from app.overlay.model import PER_MM_TO_MICRO, TERM_NAMES, FloatArray

#: Names of the fitted terms per model.
_FITTED: Final = {
    "trapezoid": TERM_NAMES,
    "linear": TERM_NAMES[:6],
    "translation": TERM_NAMES[:2],
}


@dataclass(frozen=True, slots=True)
class OverlayFit:
    """Result of fitting one overlay measurement.

    Attributes
    ----------
    terms : array, shape (8,)
        Term vector in ``TERM_NAMES`` order, raw units (um, um/mm, um/mm^2), about the panel
        centre. Terms the fitted model does not contain are exactly 0.0.
    fitted : tuple of str
        Names of the fitted terms.
    model : str
        Model actually fitted: "trapezoid", "linear" or "translation".
    requested : str
        Model asked for ("trapezoid" or "linear").
    note : str or None
        Why the fit fell back to fewer terms, or why sigma is 0; None when neither happened.
    n_sites : int
        Number of sites.
    mean_um, sigma_um, m3s_um : tuple of float
        Residual mean, sigma (n - p degrees of freedom, p terms per axis; 0.0 when n - p <= 0)
        and |mean| + 3 sigma, for x and y.
    max_residual_um : float
        Length of the largest residual vector.
    max_residual_at_mm : tuple of float
        Site (x, y) of that residual.
    """

    terms: FloatArray
    fitted: tuple[str, ...]
    model: str
    requested: str
    note: str | None
    n_sites: int
    mean_um: tuple[float, float]
    sigma_um: tuple[float, float]
    m3s_um: tuple[float, float]
    max_residual_um: float
    max_residual_at_mm: tuple[float, float]

    @property
    def scale_ppm(self) -> tuple[float, float]:
        """(Sx, Sy) in ppm."""
        return (float(self.terms[2]) * PER_MM_TO_MICRO, float(self.terms[3]) * PER_MM_TO_MICRO)

    @property
    def orientation_urad(self) -> tuple[float, float]:
        """(Ox, Oy) in urad."""
        return (float(self.terms[4]) * PER_MM_TO_MICRO, float(self.terms[5]) * PER_MM_TO_MICRO)

    @property
    def rotation_urad(self) -> float:
        """Rotation (Ox + Oy) / 2 in urad."""
        ox, oy = self.orientation_urad
        return (ox + oy) / 2.0

    @property
    def nonorthogonality_urad(self) -> float:
        """Non-orthogonality Oy - Ox in urad."""
        ox, oy = self.orientation_urad
        return oy - ox

    @property
    def trapezoid(self) -> tuple[float, float]:
        """(Kx, Ky) kept in raw units, um/mm^2 (not converted to ppm/mm)."""
        return (float(self.terms[6]), float(self.terms[7]))

    def to_dict(self) -> dict[str, object]:
        """Plain-float dictionary for JSON."""
        t = [float(v) for v in self.terms]
        sx, sy = self.scale_ppm
        ox, oy = self.orientation_urad
        return {
            "tx_um": t[0],
            "ty_um": t[1],
            "sx_ppm": sx,
            "sy_ppm": sy,
            "ox_urad": ox,
            "oy_urad": oy,
            "kx_um_per_mm2": t[6],
            "ky_um_per_mm2": t[7],
            "rotation_urad": self.rotation_urad,
            "nonorthogonality_urad": self.nonorthogonality_urad,
            "model": self.model,
            "requested": self.requested,
            "note": self.note,
            "n_sites": self.n_sites,
            "mean_x_um": self.mean_um[0],
            "mean_y_um": self.mean_um[1],
            "sigma_x_um": self.sigma_um[0],
            "sigma_y_um": self.sigma_um[1],
            "m3s_x_um": self.m3s_um[0],
            "m3s_y_um": self.m3s_um[1],
            "max_residual_um": self.max_residual_um,
            "max_residual_at_mm": list(self.max_residual_at_mm),
        }


# ----------------------------------------------------------------------------- private helpers


def _as_vector(name: str, values: object) -> FloatArray:
    a = np.asarray(values, dtype=np.float64)
    if a.ndim != 1:
        raise OverlayInputError(f"{name} must be one-dimensional, got shape {a.shape}")
    bad = np.flatnonzero(~np.isfinite(a))
    if bad.size:
        raise OverlayInputError(f"{name}[{int(bad[0])}] is not finite ({float(a[bad[0]])})")
    return a


def _check_sites(
    x: object, y: object, dx: object, dy: object
) -> tuple[FloatArray, FloatArray, FloatArray, FloatArray]:
    arrays = [_as_vector(n, v) for n, v in (("x", x), ("y", y), ("dx", dx), ("dy", dy))]
    n = arrays[0].size
    for name, a in zip(("y", "dx", "dy"), arrays[1:], strict=True):
        if a.size != n:
            raise OverlayInputError(f"{name} has {a.size} values but x has {n}")
    return arrays[0], arrays[1], arrays[2], arrays[3]


def _check_counts(counts: object, total: int) -> NDArray[np.int64]:
    c = np.asarray(counts)
    if c.size == 0:
        c = c.astype(np.int64)  # an empty list arrives as float64
    if c.ndim != 1:
        raise OverlayInputError(f"counts must be one-dimensional, got shape {c.shape}")
    if not np.issubdtype(c.dtype, np.integer):
        raise OverlayInputError(f"counts must be integers, got dtype {c.dtype}")
    bad = np.flatnonzero(c <= 0)
    if bad.size:
        raise OverlayInputError(f"counts[{int(bad[0])}] is {int(c[bad[0]])}; must be >= 1")
    if int(c.sum()) != total:
        raise OverlayInputError(f"counts sum to {int(c.sum())} but there are {total} sites")
    return c.astype(np.int64)


#: OverlayFit's slot setters in field order. A frozen dataclass's __init__ sets each field through
#: object.__setattr__ from Python; the slot descriptors, called from map in ``_make_fits``, set
#: the same fields in about half the time. There is no __post_init__ to skip, and the objects
#: equal the constructor's (test_fast_results_match_constructor checks both).
_SETTERS: Final = tuple(OverlayFit.__dict__[f.name].__set__ for f in fields(OverlayFit))


def _results(
    x: FloatArray, y: FloatArray, solution: _lsq.Solution, requested: str
) -> list[OverlayFit]:
    """Residual statistics and result objects for g measurements of sites x, y (g, n)."""
    terms, choice, notes, mean, sum_sq, worst, worst_sq = solution
    g, n = x.shape
    dof = n - np.array([_lsq.N_BASIS[m] for m in _lsq.MODELS])[choice]
    # sigma with n - p degrees of freedom; 0 (and a note) when there are none.
    sigma = np.sqrt(sum_sq * np.where(dof > 0, 1.0 / np.maximum(dof, 1), 0.0))
    m3s = np.abs(mean) + 3.0 * sigma
    terms += 0.0  # -0.0 + 0.0 is +0.0: no negative zeros in reports
    terms.setflags(write=False)  # results are frozen; each fit holds a row view
    rows = np.arange(g)
    at_x, at_y = x[rows, worst], y[rows, worst]
    # The collector would run every few hundred of the ~5 g containers made below, and now and
    # then pass over everything alive: a fifth to a third of this step's time, spent finding
    # that fresh result objects are not garbage. The previous state is restored.
    collecting = gc.isenabled()
    gc.disable()
    try:
        # Python floats and tuples in bulk, once per batch: per-element numpy scalar access is
        # the slow part here.
        means, sigmas, m3ss = (list(zip(*a.tolist(), strict=True)) for a in (mean, sigma, m3s))
        ats = list(zip(at_x.tolist(), at_y.tolist(), strict=True))
        models = [_lsq.MODELS[i] for i in choice.tolist()]
        fitted = [_FITTED[m] for m in models]
        columns = (terms, fitted, models, repeat(requested), notes, repeat(n))
        return _make_fits(g, (*columns, means, sigmas, m3ss, np.sqrt(worst_sq).tolist(), ats))
    finally:
        if collecting:
            gc.enable()


def _make_fits(g: int, columns: Iterable[Iterable[object]]) -> list[OverlayFit]:
    """g OverlayFit objects from one iterable of values per field, in field order."""
    fits = list(map(OverlayFit.__new__, repeat(OverlayFit, g)))
    for setter, column in zip(_SETTERS, columns, strict=True):
        # One field at a time through map: the calls run in C, with no Python frame per object.
        deque(map(setter, fits, column), maxlen=0)
    return fits


# ----------------------------------------------------------------------------- public API


def fit_measurement(
    x: FloatArray, y: FloatArray, dx: FloatArray, dy: FloatArray, *, trapezoid: bool = False
) -> OverlayFit:
    """Fit the overlay model to one measurement by ordinary least squares.

    Parameters
    ----------
    x, y : array, shape (n,)
        Site positions in mm, panel (or tool) frame, origin at the panel centre.
    dx, dy : array, shape (n,)
        Overlay displacements in um.
    trapezoid : bool
        Ask for the 8-term model; otherwise the 6-term linear model.

    Returns
    -------
    OverlayFit
        Falls back to fewer terms (linear, then translation) when the sites cannot determine
        the requested ones, and says why in ``note``.

    Raises
    ------
    OverlayInputError
        Non-finite values, mismatched lengths or no sites.
    """
    x, y, dx, dy = _check_sites(x, y, dx, dy)
    n = x.size
    if n == 0:
        raise OverlayInputError("a measurement needs at least one site, got none")
    requested = "trapezoid" if trapezoid else "linear"
    solution = _lsq.solve_one(x, y, dx, dy, requested)
    return _results(x[np.newaxis], y[np.newaxis], solution, requested)[0]


def fit_many(
    x: FloatArray,
    y: FloatArray,
    dx: FloatArray,
    dy: FloatArray,
    counts: NDArray[np.integer] | list[int],
    *,
    trapezoid: bool = False,
) -> list[OverlayFit]:
    """Fit many measurements at once; same results as ``fit_measurement`` on each.

    Parameters
    ----------
    x, y, dx, dy : array, shape (N,)
        Sites of all measurements concatenated (mm and um).
    counts : array of int, shape (m,)
        Number of consecutive sites belonging to each measurement; sums to N, each >= 1.
    trapezoid : bool
        Ask for the 8-term model; otherwise the 6-term linear model.

    Returns
    -------
    list of OverlayFit, length m
        In the order of ``counts``.

    Raises
    ------
    OverlayInputError
        Non-finite values, mismatched lengths, or counts that are not positive integers summing
        to N.
    """
    x, y, dx, dy = _check_sites(x, y, dx, dy)
    c = _check_counts(counts, x.size)
    requested = "trapezoid" if trapezoid else "linear"
    if c.size == 0:
        return []
    if np.all(c == c[0]):  # one site count: a reshape, no gathering
        shape = (c.size, int(c[0]))
        xs, ys, dxs, dys = (a.reshape(shape) for a in (x, y, dx, dy))
        return _results(xs, ys, _lsq.solve_group(xs, ys, dxs, dys, requested), requested)
    starts = np.concatenate([[0], np.cumsum(c)[:-1]])
    out: list[OverlayFit | None] = [None] * c.size
    for n in np.unique(c).tolist():
        members = np.flatnonzero(c == n)
        idx = starts[members, np.newaxis] + np.arange(n)
        xs, ys = x[idx], y[idx]
        fits = _results(xs, ys, _lsq.solve_group(xs, ys, dx[idx], dy[idx], requested), requested)
        for j, f in zip(members.tolist(), fits, strict=True):
            out[j] = f
    return [f for f in out if f is not None]
