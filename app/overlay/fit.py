"""Least-squares fit of the per-layer overlay model to one measurement or to many at once.

The model (see ``model``) splits into two independent regressions on the same basis::

    dx = Tx*1 + Sx*x + (-Ox)*y + Kx*xy
    dy = Ty*1 + Oy*x +   Sy*y  + Ky*xy

so a fit is one ordinary least-squares solve of the basis ``[1, x, y, xy]`` (trapezoid),
``[1, x, y]`` (linear) or ``[1]`` (translation) against two right-hand sides, dx and dy. The
number of terms acting on one axis is therefore 4, 3 or 1; that is the ``p`` in the residual
degrees of freedom ``n - p``.

Numerics: the sites are first centred on their mean and divided by one common length (the
largest distance of a site from that mean along either axis). A common length, not one per axis,
keeps the layout's true aspect ratio, so a strip of sites that is nearly a line is seen as nearly
collinear, and huge coordinates (1e6 mm) do not upset the rank test or the solve. The basis is
then orthogonalised column by column (modified Gram-Schmidt); a column with (almost) nothing
left once the earlier ones are removed means the sites cannot determine that term, and the fit
falls back to a smaller model. The coefficients found in the centred frame are re-expanded about
the panel centre (origin), which is what is reported; residuals come from the centred solve.

``fit_many`` groups measurements by site count and runs the orthogonalisation on all of a group
at once, right-hand sides included. ``fit_measurement`` applies the same rank rule to one
measurement and solves it independently with ``numpy.linalg.lstsq``.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Final

import numpy as np
from numpy.typing import NDArray

from app.overlay.errors import OverlayInputError
from app.overlay.model import PER_MM_TO_MICRO, TERM_NAMES, FloatArray

#: Model names from the fullest to the fallback of last resort, with basis columns per axis.
_MODELS: Final = ("trapezoid", "linear", "translation")
_N_BASIS: Final = {"trapezoid": 4, "linear": 3, "translation": 1}
_FITTED: Final = {
    "trapezoid": TERM_NAMES,
    "linear": TERM_NAMES[:6],
    "translation": TERM_NAMES[:2],
}
#: Rank rule: a basis column is taken as undetermined when, after the earlier columns are
#: removed, its norm is below this fraction of sqrt(n) (the norm of the ones column, the largest
#: possible on the scaled sites). Scatter off a line of less than about a billionth of the
#: layout's size carries no usable information on the missing term, and the margin to float
#: round-off (~1e-16) is wide, so the decision does not hang on the order of operations.
_RANK_RTOL: Final = 1e-9
#: Site spread below this fraction of the coordinates' magnitude is float round-off of the mean:
#: all sites are taken to coincide.
_SPREAD_RTOL: Final = 1e-12
_NO_DOF_NOTE: Final = "no residual degrees of freedom: sigma reported as 0"


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


def _normalise(x: FloatArray, y: FloatArray) -> tuple[FloatArray, FloatArray, FloatArray]:
    """Centre and scale sites of shape (g, n); return u, v (g, n) and (cx, cy, s) (g, 3)."""
    cx = x.mean(axis=-1)
    cy = y.mean(axis=-1)
    x_lo, x_hi, y_lo, y_hi = x.min(axis=-1), x.max(axis=-1), y.min(axis=-1), y.max(axis=-1)
    s = np.maximum.reduce([x_hi - cx, cx - x_lo, y_hi - cy, cy - y_lo])
    magnitude = np.maximum.reduce([np.abs(x_lo), np.abs(x_hi), np.abs(y_lo), np.abs(y_hi)])
    # Coincident sites (spread only round-off of the mean): scale 1 and exact zero columns, so
    # the rank rule sees them and drops to translation.
    coincident = s <= _SPREAD_RTOL * magnitude
    s = np.where(coincident, 1.0, s)
    keep = np.where(coincident, 0.0, 1.0 / s)[:, np.newaxis]
    u = (x - cx[:, np.newaxis]) * keep
    v = (y - cy[:, np.newaxis]) * keep
    return u, v, np.stack([cx, cy, s], axis=-1)


class _Orthogonal:
    """Modified Gram-Schmidt factor of the basis [1, u, v, uv] for g measurements at once.

    Sites are arrays (g, n). u and v are taken in order of decreasing norm (see ``__init__``).
    ``ok[i]`` (g,) says basis column i keeps a norm above ``_RANK_RTOL * sqrt(n)`` after the
    earlier columns are removed from it: that is the rank rule. Carrying the right-hand sides
    through the same sweep (``solve``) gives a backward-stable least-squares solution (Bjorck
    1967, "Solving linear least squares problems by Gram-Schmidt orthogonalization", BIT 7) and
    the residuals of each nested model on the way.
    """

    def __init__(self, u: FloatArray, v: FloatArray, k: int) -> None:
        g, n = u.shape
        self.k = k
        # Larger of u, v first: for a 2x2 triangular factor [[a, b], [0, c]] with b^2 + c^2 <=
        # a^2, sigma_min >= c / sqrt(2), so the diagonal test tracks the singular values.
        self.swap = np.einsum("gn,gn->g", v, v) > np.einsum("gn,gn->g", u, u)
        if self.swap.all() or not self.swap.any():
            first, second = (v, u) if self.swap.any() else (u, v)
        else:
            first = np.where(self.swap[:, np.newaxis], v, u)
            second = np.where(self.swap[:, np.newaxis], u, v)
        cols = [first, second, u * v] if k == 4 else [first, second][: k - 1]
        limit = _RANK_RTOL * np.sqrt(n)
        self.ok: list[NDArray[np.bool_]] = [np.ones(g, dtype=bool)]
        #: Orthogonal columns w_i (i >= 1), 1 / (w_i . w_i) (0 where not ok), and
        #: mu[i][j] = coefficient of w_i in basis column j > i (level 0 is the ones column).
        self.w: dict[int, FloatArray] = {}
        self.inv_ww: dict[int, FloatArray] = {}
        self.mu: list[dict[int, FloatArray]] = [{}]
        for j, c in enumerate(cols, start=1):
            self.mu[0][j] = c.mean(axis=1)
            cols[j - 1] = c - self.mu[0][j][:, np.newaxis]
        for i in range(1, k):
            w = cols[i - 1]
            ww = np.einsum("gn,gn->g", w, w)
            ok = np.sqrt(ww) > limit
            inv = np.where(ok, 1.0 / np.where(ok, ww, 1.0), 0.0)
            self.ok.append(ok)
            self.w[i] = w
            self.inv_ww[i] = inv
            self.mu.append({})
            for j in range(i + 1, k):
                self.mu[i][j] = np.einsum("gn,gn->g", w, cols[j - 1]) * inv
                cols[j - 1] = cols[j - 1] - self.mu[i][j][:, np.newaxis] * w

    def solve(
        self, rhs: list[FloatArray], choice: NDArray[np.int64]
    ) -> tuple[FloatArray, list[FloatArray]]:
        """Least squares of each right-hand side (g, n) on the model ``choice`` (g,) picks.

        Returns coefficients of [1, u, v, uv] (g, 4, len(rhs)) and the residuals, one (g, n)
        array per right-hand side.
        """
        g = choice.size
        k_of = np.array([_N_BASIS[m] for m in _MODELS])[choice]
        used = sorted(set(k_of.tolist()))
        coef = np.zeros((g, 4, len(rhs)))
        residuals = []
        buffer = np.empty(rhs[0].shape)
        for a, d in enumerate(rhs):
            z = [d.mean(axis=1)]
            r = d - z[0][:, np.newaxis]
            single = len(used) == 1  # the usual case: r itself becomes the residual
            out = r if single else np.empty_like(r)
            if 1 in used and not single:
                out[k_of == 1] = r[k_of == 1]
            for i in range(1, max(used)):
                z.append(np.einsum("gn,gn->g", self.w[i], r) * self.inv_ww[i])
                np.multiply(self.w[i], z[i][:, np.newaxis], out=buffer)
                r -= buffer
                if i + 1 in used and not single:  # the (i + 1)-column model's residual is final
                    out[k_of == i + 1] = r[k_of == i + 1]
            residuals.append(out)
            for k in used:
                # Back substitution on the unit upper triangular factor:
                # b_i = z_i - sum over j > i of mu_ij b_j.
                b: list[FloatArray] = [np.zeros(g)] * k
                for i in range(k - 1, -1, -1):
                    b[i] = z[i] - sum((self.mu[i][j] * b[j] for j in range(i + 1, k)), np.zeros(g))
                sel = k_of == k
                coef[sel, 0, a] = b[0][sel]
                if k >= 3:
                    coef[sel, 1, a] = np.where(self.swap, b[2], b[1])[sel]
                    coef[sel, 2, a] = np.where(self.swap, b[1], b[2])[sel]
                if k == 4:
                    coef[sel, 3, a] = b[3][sel]
        return coef, residuals


def _k_max(n: int, requested: str) -> int:
    """Basis columns needed: those of the fullest model that ``n`` sites can possibly carry."""
    return max(k for k in _N_BASIS.values() if k <= min(n, _N_BASIS[requested]))


def _flags(orth: _Orthogonal) -> dict[str, NDArray[np.bool_]]:
    """The rank rule per model: determined when every basis column passed; (g,) each."""
    flags: dict[str, NDArray[np.bool_]] = {}
    if orth.k >= 3:
        flags["linear"] = orth.ok[1] & orth.ok[2]
    if orth.k == 4:
        flags["trapezoid"] = flags["linear"] & orth.ok[3]
    return flags


def _choose(
    n: int, requested: str, flags: dict[str, NDArray[np.bool_]], g: int
) -> tuple[NDArray[np.int64], list[str | None]]:
    """Model used for each of g measurements of n sites (index into ``_MODELS``) and notes."""
    choice = np.full(g, len(_MODELS) - 1, dtype=np.int64)
    undecided = np.ones(g, dtype=bool)
    reasons: dict[int, list[str]] = {}
    for i in range(_MODELS.index(requested), len(_MODELS) - 1):
        name = _MODELS[i]
        if n < _N_BASIS[name]:
            why = f"{name} needs at least {_N_BASIS[name]} sites, got {n}"
            ok = np.zeros(g, dtype=bool)
        else:
            why = "sites are collinear" if name == "linear" else "sites do not fix the x*y terms"
            ok = flags[name]
        choice[undecided & ok] = i
        failed = undecided & ~ok
        if name == "trapezoid" and "linear" in flags:
            # Collinear sites fail both; say so once, at the linear step.
            reasons.update({j: [] for j in np.flatnonzero(failed & ~flags["linear"]).tolist()})
            failed &= flags["linear"]
        for j in np.flatnonzero(failed).tolist():
            reasons.setdefault(j, []).append(why)
        undecided &= ~ok
    notes: list[str | None] = [None] * g
    no_dof = [n - _N_BASIS[m] <= 0 for m in _MODELS]
    for j in set(reasons) | set(np.flatnonzero(np.array(no_dof)[choice]).tolist()):
        model = _MODELS[int(choice[j])]
        parts = [*reasons.get(j, []), f"fitted {model}"] if j in reasons else []
        if no_dof[int(choice[j])]:
            parts.append(_NO_DOF_NOTE)
        notes[j] = "; ".join(parts)
    return choice, notes


def _to_terms(coef: FloatArray, frame: FloatArray) -> FloatArray:
    """Re-expand centred coefficients about the origin.

    ``coef`` (g, 4, 2): coefficients of [1, u, v, uv] for dx and dy, zero-padded;
    ``frame`` (g, 3): (cx, cy, s) with u = (x - cx)/s, v = (y - cy)/s. Expanding
    b0 + b1 u + b2 v + b3 uv in x, y gives
    c_xy = b3/s^2, c_x = b1/s - b3 cy/s^2, c_y = b2/s - b3 cx/s^2,
    c_1 = b0 - b1 cx/s - b2 cy/s + b3 cx cy/s^2. Returns term vectors (g, 8).
    """
    cx, cy, s = (frame[:, i, np.newaxis] for i in range(3))
    b0, b1, b2, b3 = (coef[:, i, :] for i in range(4))
    c_xy = b3 / s**2
    c_x = b1 / s - c_xy * cy
    c_y = b2 / s - c_xy * cx
    c_1 = b0 - b1 * cx / s - b2 * cy / s + c_xy * cx * cy
    terms = np.empty((coef.shape[0], 8))
    # x axis basis (1, x, y, xy) -> (Tx, Sx, -Ox, Kx); y axis -> (Ty, Oy, Sy, Ky).
    terms[:, 0], terms[:, 1] = c_1[:, 0], c_1[:, 1]
    terms[:, 2], terms[:, 3] = c_x[:, 0], c_y[:, 1]
    terms[:, 4], terms[:, 5] = -c_y[:, 0], c_x[:, 1]
    terms[:, 6], terms[:, 7] = c_xy[:, 0], c_xy[:, 1]
    return terms


def _results(
    x: FloatArray,
    y: FloatArray,
    rx: FloatArray,
    ry: FloatArray,
    terms: FloatArray,
    choice: NDArray[np.int64],
    notes: list[str | None],
    requested: str,
) -> list[OverlayFit]:
    """Residual statistics and result objects for g measurements of n sites.

    x, y, rx, ry (g, n): sites and residuals; terms (g, 8); choice (g,) index into ``_MODELS``.
    """
    g, n = x.shape
    dof = n - np.array([_N_BASIS[m] for m in _MODELS])[choice]
    # sigma with n - p degrees of freedom; 0 (and a note) when there are none.
    inv_dof = np.where(dof > 0, 1.0 / np.maximum(dof, 1), 0.0)
    stats = []
    for r in (rx, ry):
        mean = r.mean(axis=1)
        sigma = np.sqrt(np.einsum("gn,gn->g", r, r) * inv_dof)
        stats.append((mean, sigma, np.abs(mean) + 3.0 * sigma))
    length_sq = rx * rx + ry * ry  # np.hypot is several times slower and not needed here
    worst = length_sq.argmax(axis=1)
    rows = np.arange(g)
    terms[:, :] = np.where(terms == 0.0, 0.0, terms)  # no negative zeros in reports
    terms.setflags(write=False)  # results are frozen; each fit holds a row view
    # Bulk conversion to Python floats: per-element numpy scalar access is the slow part here.
    mean_l, sigma_l, m3s_l = (
        list(zip(a.tolist(), b.tolist(), strict=True))
        for a, b in zip(stats[0], stats[1], strict=True)
    )
    worst_l = np.sqrt(length_sq[rows, worst]).tolist()
    at_l = list(zip(x[rows, worst].tolist(), y[rows, worst].tolist(), strict=True))
    models = [_MODELS[i] for i in choice.tolist()]
    # Positional arguments in field order: keyword construction costs about twice as much, and
    # building the objects is a large share of fit_many's time.
    return [
        OverlayFit(row, _FITTED[model], model, requested, note, n, mean, sigma, m3s, worst, at)
        for row, model, note, mean, sigma, m3s, worst, at in zip(
            terms, models, notes, mean_l, sigma_l, m3s_l, worst_l, at_l, strict=True
        )
    ]


def _fit_group(
    x: FloatArray, y: FloatArray, dx: FloatArray, dy: FloatArray, requested: str
) -> list[OverlayFit]:
    """Batched fit of g measurements with the same site count n; all arrays (g, n)."""
    g, n = x.shape
    u, v, frame = _normalise(x, y)
    orth = _Orthogonal(u, v, _k_max(n, requested))
    choice, notes = _choose(n, requested, _flags(orth), g)
    coef, (rx, ry) = orth.solve([dx, dy], choice)
    terms = _to_terms(coef, frame)
    return _results(x, y, rx, ry, terms, choice, notes, requested)


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
    u, v, frame = _normalise(x[np.newaxis], y[np.newaxis])
    k_max = _k_max(n, requested)
    choice, notes = _choose(n, requested, _flags(_Orthogonal(u, v, k_max)), 1)
    k = _N_BASIS[_MODELS[int(choice[0])]]
    # Same rank rule as fit_many, independent solve: LAPACK least squares on [1, u, v, uv][:k].
    design = np.stack([np.ones(n), u[0], v[0], u[0] * v[0]][:k], axis=-1)
    d = np.stack([dx, dy], axis=-1)
    b, *_ = np.linalg.lstsq(design, d, rcond=None)
    coef = np.zeros((1, 4, 2))
    coef[0, :k, :] = b
    residual = (d - design @ b).T[:, np.newaxis, :]
    terms = _to_terms(coef, frame)
    return _results(
        x[np.newaxis], y[np.newaxis], residual[0], residual[1], terms, choice, notes, requested
    )[0]


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
        return _fit_group(
            x.reshape(shape), y.reshape(shape), dx.reshape(shape), dy.reshape(shape), requested
        )
    starts = np.concatenate([[0], np.cumsum(c)[:-1]])
    out: list[OverlayFit | None] = [None] * c.size
    for n in np.unique(c).tolist():
        members = np.flatnonzero(c == n)
        idx = starts[members, np.newaxis] + np.arange(n)
        fits = _fit_group(x[idx], y[idx], dx[idx], dy[idx], requested)
        for j, f in zip(members.tolist(), fits, strict=True):
            out[j] = f
    return [f for f in out if f is not None]
