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

The fit guard: given a reach (the box around the product's check points, ``reach_of``), a model
is kept only where its prediction error anywhere in the reach stays within the noise of one
site, that is where its leverage h = z^T (B^T B)^-1 z is at most 1; otherwise the fit falls back
to fewer terms and says so in ``note``. The rule and its grounds are in ``_lsq``'s docstring.
Every fit reports ``leverage``, the largest h of its model over the reach (over the sites' own
box when no reach is given): sigma^2 * leverage bounds the variance of the model anywhere in the
reach, which is what the L2L check adds for the fit's own uncertainty.
"""

from __future__ import annotations

from collections import deque
from collections.abc import Iterable
from dataclasses import dataclass, fields
from itertools import repeat
from typing import Final

import numpy as np
from numpy.typing import NDArray

from app.overlay import _lsq
from app.overlay._guard import check_reach, reach_of
from app.overlay.errors import OverlayInputError
from app.overlay.model import PER_MM_TO_MICRO, TERM_NAMES, FloatArray

__all__ = ["FIGURES", "OverlayFit", "fit_many", "fit_measurement", "reach_of"]

#: Order of ``OverlayFit.figures``.
FIGURES: Final = (
    "mean_x_um", "mean_y_um", "sigma_x_um", "sigma_y_um", "m3s_x_um", "m3s_y_um",
    "max_residual_um", "max_residual_x_mm", "max_residual_y_mm", "leverage",
)
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
    figures : array, shape (10,)
        The residual statistics and the leverage in ``FIGURES`` order, read through the
        properties below. One read-only row of an array per fit, not five Python containers:
        numpy arrays are not followed by the garbage collector, so a batch of ten thousand fits
        makes a fifth of the tracked objects it would otherwise, and the collector runs that
        much less often while they are built.

    Properties ``mean_um``, ``sigma_um``, ``m3s_um`` (x, y): residual mean, sigma (n - p
    degrees of freedom, p terms per axis; 0.0 when n - p <= 0) and |mean| + 3 sigma.
    ``max_residual_um`` and ``max_residual_at_mm``: the largest residual vector and its site.
    ``leverage``: the fitted model's largest leverage over the reach (the sites' box when none
    was given); the model's variance there is at most ``leverage`` times the site variance.
    """

    terms: FloatArray
    fitted: tuple[str, ...]
    model: str
    requested: str
    note: str | None
    n_sites: int
    figures: FloatArray

    @property
    def mean_um(self) -> tuple[float, float]:
        """Residual mean (x, y), um."""
        return (float(self.figures[0]), float(self.figures[1]))

    @property
    def sigma_um(self) -> tuple[float, float]:
        """Residual sigma (x, y), n - p degrees of freedom, um."""
        return (float(self.figures[2]), float(self.figures[3]))

    @property
    def m3s_um(self) -> tuple[float, float]:
        """|mean| + 3 sigma (x, y), um."""
        return (float(self.figures[4]), float(self.figures[5]))

    @property
    def max_residual_um(self) -> float:
        """Length of the largest residual vector, um."""
        return float(self.figures[6])

    @property
    def max_residual_at_mm(self) -> tuple[float, float]:
        """Site (x, y) of the largest residual vector, mm."""
        return (float(self.figures[7]), float(self.figures[8]))

    @property
    def leverage(self) -> float:
        """Largest leverage of the fitted model over the reach (see the class docstring)."""
        return float(self.figures[9])

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
            "leverage": self.leverage,
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
    terms, choice, notes, mean, sum_sq, worst, worst_sq, leverage = solution
    g, n = x.shape
    dof = n - np.array([_lsq.N_BASIS[m] for m in _lsq.MODELS])[choice]
    # sigma with n - p degrees of freedom; 0 (and a note) when there are none.
    sigma = np.sqrt(sum_sq * np.where(dof > 0, 1.0 / np.maximum(dof, 1), 0.0))
    m3s = np.abs(mean) + 3.0 * sigma
    terms += 0.0  # -0.0 + 0.0 is +0.0: no negative zeros in reports
    terms.setflags(write=False)  # results are frozen; each fit holds a row view
    rows = np.arange(g)
    figures = np.empty((g, len(FIGURES)))
    figures[:, 0:2], figures[:, 2:4], figures[:, 4:6] = mean.T, sigma.T, m3s.T
    figures[:, 6] = np.sqrt(worst_sq)
    figures[:, 7], figures[:, 8] = x[rows, worst], y[rows, worst]
    figures[:, 9] = leverage
    figures += 0.0
    figures.setflags(write=False)
    models = [_lsq.MODELS[i] for i in choice.tolist()]
    fitted = [_FITTED[m] for m in models]
    return _make_fits(g, (terms, fitted, models, repeat(requested), notes, repeat(n), figures))


def _make_fits(g: int, columns: Iterable[Iterable[object]]) -> list[OverlayFit]:
    """g OverlayFit objects from one iterable of values per field, in field order."""
    fits = list(map(OverlayFit.__new__, repeat(OverlayFit, g)))
    for setter, column in zip(_SETTERS, columns, strict=True):
        # One field at a time through map: the calls run in C, with no Python frame per object.
        deque(map(setter, fits, column), maxlen=0)
    return fits


# ----------------------------------------------------------------------------- public API


def fit_measurement(
    x: FloatArray,
    y: FloatArray,
    dx: FloatArray,
    dy: FloatArray,
    *,
    trapezoid: bool = False,
    reach_mm: FloatArray | None = None,
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
    reach_mm : array, shape (4,), or None
        Box (x_lo, x_hi, y_lo, y_hi), mm, where the model will be used (``reach_of`` the
        check points). Applies the fit guard; None fits without it.

    Returns
    -------
    OverlayFit
        Falls back to fewer terms (linear, then translation) when the sites cannot determine
        the requested ones, or cover too little of the reach for them, and says why in
        ``note``.

    Raises
    ------
    OverlayInputError
        Non-finite values, mismatched lengths, no sites or a bad reach.
    """
    x, y, dx, dy = _check_sites(x, y, dx, dy)
    reach = check_reach(reach_mm, None)
    n = x.size
    if n == 0:
        raise OverlayInputError("a measurement needs at least one site, got none")
    requested = "trapezoid" if trapezoid else "linear"
    solution = _lsq.solve_one(x, y, dx, dy, requested, reach)
    return _results(x[np.newaxis], y[np.newaxis], solution, requested)[0]


def fit_many(
    x: FloatArray,
    y: FloatArray,
    dx: FloatArray,
    dy: FloatArray,
    counts: NDArray[np.integer] | list[int],
    *,
    trapezoid: bool = False,
    reach_mm: FloatArray | None = None,
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
    reach_mm : array, shape (4,) or (m, 4), or None
        The fit guard's box for all measurements, or one per measurement (see
        ``fit_measurement``).

    Returns
    -------
    list of OverlayFit, length m
        In the order of ``counts``.

    Raises
    ------
    OverlayInputError
        Non-finite values, mismatched lengths, counts that are not positive integers summing
        to N, or a bad reach.
    """
    x, y, dx, dy = _check_sites(x, y, dx, dy)
    c = _check_counts(counts, x.size)
    reach = check_reach(reach_mm, c.size)
    requested = "trapezoid" if trapezoid else "linear"
    if c.size == 0:
        return []
    # Measurements are solved in groups of one site count and one reach.
    if reach is None or reach.ndim == 1:
        boxes: list[FloatArray | None] = [reach]
        box_of = np.zeros(c.size, dtype=np.int64)
    else:
        unique, box_of = np.unique(reach, axis=0, return_inverse=True)
        boxes = list(unique)
        box_of = box_of.reshape(-1)
    if len(boxes) == 1 and np.all(c == c[0]):  # one site count: a reshape, no gathering
        shape = (c.size, int(c[0]))
        xs, ys, dxs, dys = (a.reshape(shape) for a in (x, y, dx, dy))
        solution = _lsq.solve_group(xs, ys, dxs, dys, requested, boxes[0])
        return _results(xs, ys, solution, requested)
    starts = np.concatenate([[0], np.cumsum(c)[:-1]])
    out: list[OverlayFit | None] = [None] * c.size
    for b, box in enumerate(boxes):
        for n in np.unique(c[box_of == b]).tolist():
            members = np.flatnonzero((c == n) & (box_of == b))
            idx = starts[members, np.newaxis] + np.arange(n)
            xs, ys = x[idx], y[idx]
            solution = _lsq.solve_group(xs, ys, dx[idx], dy[idx], requested, box)
            for j, f in zip(members.tolist(), _results(xs, ys, solution, requested), strict=True):
                out[j] = f
    return [f for f in out if f is not None]
