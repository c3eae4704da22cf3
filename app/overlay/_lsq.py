"""Numeric core of the overlay fit: normalisation, rank rule, model choice and the solves.

Private to ``app.overlay.fit``, which checks inputs and builds the results. The model splits
into two regressions on one basis, ``[1, x, y, xy]`` (trapezoid), ``[1, x, y]`` (linear) or
``[1]`` (translation), against dx and dy; see the ``fit`` module docstring.

Numerics: the sites are first centred on their mean and divided by one common length (the
largest distance of a site from that mean along either axis). A common length, not one per axis,
keeps the layout's true aspect ratio, so a strip of sites that is nearly a line is seen as nearly
collinear, and huge coordinates (1e6 mm) do not upset the rank test or the solve. The basis is
then orthogonalised column by column (modified Gram-Schmidt); a column with (almost) nothing
left once the earlier ones are removed means the sites cannot determine that term, and the fit
falls back to a smaller model. The coefficients found in the centred frame are re-expanded about
the panel centre (origin), which is what is reported; residuals come from the centred solve.

Three solves share that rank rule:

- ``solve_one``: one measurement, LAPACK least squares (``numpy.linalg.lstsq``).
- ``solve_group``, layouts seen at least ``MIN_SHARED`` times in the group: a tool measures the
  same target grid every time, so measurements whose x and y are exactly the same share one
  rank decision and one least-squares operator (the pseudo-inverse of the basis), applied to
  all their right-hand sides by matrix products.
- ``solve_group``, every other measurement: the orthogonalisation runs on all of them at once,
  right-hand sides included (``Orthogonal``).

The fit guard (leverage of the check points, and the fallback it forces) is in ``_guard``.
"""

from __future__ import annotations

from typing import Final, NamedTuple

import numpy as np
from numpy.typing import NDArray

from app.overlay._guard import (
    LEVERAGE_MAX,
    chosen_leverage,
    cover_reason,
    reach_leverage,
    sites_box,
)
from app.overlay.model import FloatArray

IntArray = NDArray[np.int64]
BoolArray = NDArray[np.bool_]

#: Model names from the fullest to the fallback of last resort, and basis columns per axis.
MODELS: Final = ("trapezoid", "linear", "translation")
#: How notes name each model: by its terms (docs/glossary.md, fit models).
SAID: Final = {"trapezoid": "8 terms", "linear": "6 terms", "translation": "2 terms"}
N_BASIS: Final = {"trapezoid": 4, "linear": 3, "translation": 1}
#: Rank rule: a basis column is taken as undetermined when, after the earlier columns are
#: removed, its norm is below this fraction of sqrt(n) (the norm of the ones column, the largest
#: possible on the scaled sites). Scatter off a line of less than about a billionth of the
#: layout's size carries no usable information on the missing term, and the margin to float
#: round-off (~1e-16) is wide, so the decision does not hang on the order of operations.
RANK_RTOL: Final = 1e-9
#: Site spread below this fraction of the coordinates' magnitude is float round-off of the mean:
#: all sites are taken to coincide.
SPREAD_RTOL: Final = 1e-12
NO_DOF_NOTE: Final = "no residual degrees of freedom: sigma reported as 0"
#: Fewest measurements of one layout worth a shared operator: below about this many (measured at
#: 49 sites), the per-layout work, a couple of dozen small numpy calls, costs more than the
#: batched orthogonalisation of the same measurements.
MIN_SHARED: Final = 16
#: Rows per matrix product on a shared layout. Blocks stay in cache, and stay below the size at
#: which OpenBLAS hands a product this thin to its thread pool: waking the pool costs more than
#: the product, several milliseconds per call when the machine is busy.
_BLOCK: Final = 1024


class Solution(NamedTuple):
    """Fits of g measurements and the sums their residual statistics need.

    terms (g, 8) about the origin; choice (g,) index into ``MODELS``; notes per measurement;
    residual mean and sum of squares per axis (2, g); the site of the largest residual vector
    and its squared length (g,); the fitted model's largest leverage over the reach (g,).
    Residuals are reduced to these where they are made, so the
    shared-layout solve works through a group block by block and never holds its residuals.
    """

    terms: FloatArray
    choice: IntArray
    notes: list[str | None]
    mean: FloatArray
    sum_sq: FloatArray
    worst: IntArray
    worst_sq: FloatArray
    leverage: FloatArray


def summarise(
    rx: FloatArray, ry: FloatArray
) -> tuple[FloatArray, FloatArray, IntArray, FloatArray]:
    """The residual fields of ``Solution`` from residuals rx, ry (g, n); overwrites both."""
    n = rx.shape[1]
    # einsum sums rows of a few dozen values about twice as fast as ndarray.sum or mean.
    mean = np.stack([np.einsum("gn->g", rx), np.einsum("gn->g", ry)]) / n
    sum_sq = np.stack([np.einsum("gn,gn->g", rx, rx), np.einsum("gn,gn->g", ry, ry)])
    # Squared length in place (np.hypot is several times slower and not needed here).
    length_sq = np.add(np.square(rx, out=rx), np.square(ry, out=ry), out=rx)
    worst = length_sq.argmax(axis=1)
    return mean, sum_sq, worst, length_sq[np.arange(rx.shape[0]), worst]


def normalise(x: FloatArray, y: FloatArray) -> tuple[FloatArray, FloatArray, FloatArray]:
    """Centre and scale sites of shape (g, n); return u, v (g, n) and (cx, cy, s) (g, 3)."""
    cx = x.mean(axis=-1)
    cy = y.mean(axis=-1)
    x_lo, x_hi, y_lo, y_hi = x.min(axis=-1), x.max(axis=-1), y.min(axis=-1), y.max(axis=-1)
    s = np.maximum.reduce([x_hi - cx, cx - x_lo, y_hi - cy, cy - y_lo])
    magnitude = np.maximum.reduce([np.abs(x_lo), np.abs(x_hi), np.abs(y_lo), np.abs(y_hi)])
    # Coincident sites (spread only round-off of the mean): scale 1 and exact zero columns, so
    # the rank rule sees them and drops to translation.
    coincident = s <= SPREAD_RTOL * magnitude
    s = np.where(coincident, 1.0, s)
    keep = np.where(coincident, 0.0, 1.0 / s)[:, np.newaxis]
    u = (x - cx[:, np.newaxis]) * keep
    v = (y - cy[:, np.newaxis]) * keep
    return u, v, np.stack([cx, cy, s], axis=-1)


class Orthogonal:
    """Modified Gram-Schmidt factor of the basis [1, u, v, uv] for g measurements at once.

    Sites are arrays (g, n). u and v are taken in order of decreasing norm (see ``__init__``).
    ``ok[i]`` (g,) says basis column i keeps a norm above ``RANK_RTOL * sqrt(n)`` after the
    earlier columns are removed from it: that is the rank rule. Carrying the right-hand sides
    through the same sweep (``solve``) gives a backward-stable least-squares solution (Bjorck
    1967, "Solving linear least squares problems by Gram-Schmidt orthogonalization", BIT 7) and
    the residuals of each nested model on the way.
    """

    def __init__(self, u: FloatArray, v: FloatArray, k: int) -> None:
        g, n = u.shape
        self.k = k
        self.n_sites = (g, n)
        # Larger of u, v first: for a 2x2 triangular factor [[a, b], [0, c]] with b^2 + c^2 <=
        # a^2, sigma_min >= c / sqrt(2), so the diagonal test tracks the singular values.
        self.swap = np.einsum("gn,gn->g", v, v) > np.einsum("gn,gn->g", u, u)
        if self.swap.all() or not self.swap.any():
            first, second = (v, u) if self.swap.any() else (u, v)
        else:
            first = np.where(self.swap[:, np.newaxis], v, u)
            second = np.where(self.swap[:, np.newaxis], u, v)
        cols = [first, second, u * v] if k == 4 else [first, second][: k - 1]
        limit = RANK_RTOL * np.sqrt(n)
        self.ok: list[BoolArray] = [np.ones(g, dtype=bool)]
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

    def solve(self, rhs: list[FloatArray], choice: IntArray) -> tuple[FloatArray, list[FloatArray]]:
        """Least squares of each right-hand side (g, n) on the model ``choice`` (g,) picks.

        Returns coefficients of [1, u, v, uv] (g, 4, len(rhs)) and the residuals, one (g, n)
        array per right-hand side.
        """
        g = choice.size
        k_of = np.array([N_BASIS[m] for m in MODELS])[choice]
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


def k_max(n: int, requested: str) -> int:
    """Basis columns needed: those of the fullest model that ``n`` sites can possibly carry."""
    return max(k for k in N_BASIS.values() if k <= min(n, N_BASIS[requested]))


def rank_flags(orth: Orthogonal) -> dict[str, BoolArray]:
    """The rank rule per model: determined when every basis column passed; (g,) each."""
    flags: dict[str, BoolArray] = {}
    if orth.k >= 3:
        flags["linear"] = orth.ok[1] & orth.ok[2]
    if orth.k == 4:
        flags["trapezoid"] = flags["linear"] & orth.ok[3]
    return flags


def choose(
    n: int,
    requested: str,
    flags: dict[str, BoolArray],
    g: int,
    leverage: dict[str, FloatArray] | None = None,
) -> tuple[IntArray, list[str | None]]:
    """Model used for each of g measurements of n sites (index into ``MODELS``) and notes.

    ``leverage``, when given, applies the fit guard: a model whose largest leverage over the
    reach is above ``LEVERAGE_MAX`` is not kept.
    """
    choice = np.full(g, len(MODELS) - 1, dtype=np.int64)
    undecided = np.ones(g, dtype=bool)
    reasons: dict[int, list[str]] = {}
    for i in range(MODELS.index(requested), len(MODELS) - 1):
        name = MODELS[i]
        if n < N_BASIS[name]:
            why = f"{SAID[name]} need at least {N_BASIS[name]} sites, got {n}"
            ok = np.zeros(g, dtype=bool)
        else:
            why = "sites are collinear" if name == "linear" else "sites do not fix the x*y terms"
            ok = flags[name]
        covered = np.ones(g, dtype=bool)
        if leverage is not None and name in leverage:
            covered = leverage[name] <= LEVERAGE_MAX
        choice[undecided & ok & covered] = i
        failed = undecided & ~ok
        thin = undecided & ok & ~covered
        if name == "trapezoid" and "linear" in flags:
            # Collinear sites fail both; say so once, at the linear step. The same for cover:
            # leverage only grows with terms, so a linear model that fails fails trapezoid too.
            reasons.update({j: [] for j in np.flatnonzero(failed & ~flags["linear"]).tolist()})
            failed &= flags["linear"]
            if leverage is not None:
                lin_thin = flags["linear"] & (leverage["linear"] > LEVERAGE_MAX)
                reasons.update({j: [] for j in np.flatnonzero(thin & lin_thin).tolist()})
                thin &= ~lin_thin
        for j in np.flatnonzero(failed).tolist():
            reasons.setdefault(j, []).append(why)
        if leverage is not None:
            for j in np.flatnonzero(thin).tolist():
                reasons.setdefault(j, []).append(cover_reason(SAID[name],
                                                             float(leverage[name][j])))
        undecided &= ~(ok & covered)
    notes: list[str | None] = [None] * g
    no_dof = [n - N_BASIS[m] <= 0 for m in MODELS]
    for j in set(reasons) | set(np.flatnonzero(np.array(no_dof)[choice]).tolist()):
        model = MODELS[int(choice[j])]
        parts = [*reasons.get(j, []), f"fitted {SAID[model]}"] if j in reasons else []
        if no_dof[int(choice[j])]:
            parts.append(NO_DOF_NOTE)
        notes[j] = "; ".join(parts)
    return choice, notes


def to_terms(coef: FloatArray, frame: FloatArray) -> FloatArray:
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


def _basis(u: FloatArray, v: FloatArray, k: int) -> FloatArray:
    """The first k columns of [1, u, v, uv] for one layout, u, v (n,); shape (n, k)."""
    return np.stack([np.ones(u.size), u, v, u * v][:k], axis=-1)


# ----------------------------------------------------------------------------- one measurement


def _decide(
    x: FloatArray, y: FloatArray, requested: str, reach: FloatArray | None
) -> tuple[Orthogonal, FloatArray, FloatArray, FloatArray, IntArray, list[str | None], FloatArray]:
    """Rank rule and fit guard for layouts (g, n): the factor, the normalised sites u, v and
    their frame, the model choice, notes and the chosen model's leverage over the reach (over
    the sites' own box without one)."""
    g, n = x.shape
    u, v, frame = normalise(x, y)
    orth = Orthogonal(u, v, k_max(n, requested))
    box = sites_box(x, y) if reach is None else np.broadcast_to(reach, (g, 4))
    leverage = reach_leverage(orth, frame, box)
    guard = None if reach is None else leverage
    choice, notes = choose(n, requested, rank_flags(orth), g, guard)
    return orth, u, v, frame, choice, notes, chosen_leverage(leverage, choice)


def solve_one(
    x: FloatArray,
    y: FloatArray,
    dx: FloatArray,
    dy: FloatArray,
    requested: str,
    reach: FloatArray | None = None,
) -> Solution:
    """One measurement, sites (n,): the batched rank rule, an independent LAPACK solve."""
    _, u, v, frame, choice, notes, leverage = _decide(
        x[np.newaxis], y[np.newaxis], requested, reach
    )
    k = N_BASIS[MODELS[int(choice[0])]]
    design = _basis(u[0], v[0], k)
    d = np.stack([dx, dy], axis=-1)
    b, *_ = np.linalg.lstsq(design, d, rcond=None)
    coef = np.zeros((1, 4, 2))
    coef[0, :k, :] = b
    residual = (d - design @ b).T[:, np.newaxis, :]
    summary = summarise(residual[0], residual[1])
    return Solution(to_terms(coef, frame), choice, notes, *summary, leverage)


# ----------------------------------------------------------------------------- many measurements


def _hash_weights(n: int) -> tuple[NDArray[np.uint64], NDArray[np.uint64]]:
    """Fixed random odd multipliers for hashing the bit patterns of x and y (n,) each."""
    w = np.random.default_rng(0x0E7A).integers(0, 2**64 - 1, size=(2, n), dtype=np.uint64)
    w |= np.uint64(1)
    return w[0], w[1]


def shared_layouts(x: FloatArray, y: FloatArray) -> tuple[IntArray, IntArray]:
    """Layouts that at least ``MIN_SHARED`` measurements of sites (g, n) have in common.

    Returns ``layout`` (g,), the index of each measurement's shared layout or -1, and the row of
    one measurement with each shared layout. Measurements share a layout only when every x and
    y compares equal (``==``): a hash of the bit patterns groups candidates in one sort, and each
    is then compared with its group's first row, so a hash collision only loses the sharing,
    never mixes layouts. (Layouts that differ only in the sign of a zero may or may not be
    grouped; the arithmetic is the same either way.)
    """
    g, n = x.shape
    none = np.full(g, -1, dtype=np.int64), np.zeros(0, dtype=np.int64)
    if g < MIN_SHARED:
        return none
    if (x == x[0]).all() and (y == y[0]).all():  # the usual case: one target grid throughout
        return np.zeros(g, dtype=np.int64), np.zeros(1, dtype=np.int64)
    wx, wy = _hash_weights(n)
    # Unsigned products and sums wrap modulo 2**64: a multiplicative hash of the bit patterns.
    h = np.einsum("gn,n->g", x.view(np.uint64), wx) + np.einsum("gn,n->g", y.view(np.uint64), wy)
    _, first, inverse, counts = np.unique(
        h, return_index=True, return_inverse=True, return_counts=True
    )
    candidates = np.flatnonzero(counts[inverse] >= MIN_SHARED)
    rep = first[inverse[candidates]]
    same = (x[candidates] == x[rep]).all(axis=1) & (y[candidates] == y[rep]).all(axis=1)
    members = candidates[same]
    hashed = inverse[members]
    keep = np.bincount(hashed, minlength=first.size)[hashed] >= MIN_SHARED
    members, hashed = members[keep], hashed[keep]
    used, compact = np.unique(hashed, return_inverse=True)
    layout = np.full(g, -1, dtype=np.int64)
    layout[members] = compact
    return layout, first[used].astype(np.int64)


def _solve_batched(
    x: FloatArray,
    y: FloatArray,
    dx: FloatArray,
    dy: FloatArray,
    requested: str,
    reach: FloatArray | None,
) -> Solution:
    """Measurements of sites (g, n), each with its own layout: one orthogonalisation for all."""
    orth, _, _, frame, choice, notes, leverage = _decide(x, y, requested, reach)
    coef, (rx, ry) = orth.solve([dx, dy], choice)
    return Solution(to_terms(coef, frame), choice, notes, *summarise(rx, ry), leverage)


def _solve_shared(
    x: FloatArray,
    y: FloatArray,
    dx: FloatArray,
    dy: FloatArray,
    requested: str,
    reach: FloatArray | None,
    layout: IntArray,
    reps: IntArray,
    out: Solution,
) -> None:
    """Measurements grouped by shared layout (see ``shared_layouts``), arrays (g, n).

    One rank decision and one least-squares operator per layout, applied to all its measurements
    at once; writes their rows of ``out``.
    """
    g, n = x.shape
    _, u, v, frame, choice, notes, leverage = _decide(x[reps], y[reps], requested, reach)
    k_of = np.array([N_BASIS[m] for m in MODELS])[choice]
    # Pseudo-inverses by SVD, the factorisation lstsq uses in solve_one, stacked over the
    # layouts of each basis size; rows of d @ op_t are each measurement's coefficients.
    columns = np.stack([np.ones_like(u), u, v, u * v], axis=-1)  # (layouts, n, 4)
    bases: dict[int, FloatArray] = {}
    ops_t: dict[int, FloatArray] = {}
    for k in np.unique(k_of).tolist():
        same_k = np.flatnonzero(k_of == k)
        basis_k = columns[same_k, :, :k]
        for i, basis, op in zip(same_k.tolist(), basis_k, np.linalg.pinv(basis_k), strict=True):
            bases[i], ops_t[i] = basis, op.T
    groups: list[IntArray | None]  # rows of each layout; None: all rows, as views (no gathers)
    if reps.size == 1 and layout.min() == 0:
        groups = [None]
        members: IntArray | slice = slice(None)
    else:
        members = np.flatnonzero(layout >= 0)
        order = members[np.argsort(layout[members], kind="stable")]
        groups = list(np.split(order, np.cumsum(np.bincount(layout[members]))[:-1]))
    coef = np.zeros((g, 4, 2))
    # Residuals x, y and the fitted values of one block of rows: kept in cache and reduced to
    # their sums there, never stored for the whole group.
    scratch = np.empty((3, _BLOCK, n))
    for i, rows in enumerate(groups):
        k, basis, op_t = int(k_of[i]), bases[i], ops_t[i]
        size = g if rows is None else rows.size
        for lo in range(0, size, _BLOCK):
            sel: slice | IntArray = (
                slice(lo, lo + _BLOCK) if rows is None else rows[lo : lo + _BLOCK]
            )
            m = min(_BLOCK, size - lo)
            for a, d in enumerate((dx, dy)):
                r = scratch[a, :m]
                src = d[sel] if rows is None else np.take(d, rows[lo : lo + m], axis=0, out=r)
                # Centre first, as the batched sweep does: the ones column takes the mean
                # exactly, and data far from zero (a large translation) then cancel in the
                # residual only by what varies over the layout.
                mean = np.einsum("gn->g", src) / n
                np.subtract(src, mean[:, np.newaxis], out=r)
                b = r @ op_t
                r -= np.matmul(b, basis.T, out=scratch[2, :m])
                b[:, 0] += mean
                coef[sel, :k, a] = b
            summary = summarise(scratch[0, :m], scratch[1, :m])
            out.mean[:, sel], out.sum_sq[:, sel], out.worst[sel], out.worst_sq[sel] = summary
    at = layout[members]
    out.terms[members] = to_terms(coef[members], frame[at])
    out.choice[members] = choice[at]
    out.leverage[members] = leverage[at]
    if groups[0] is None:
        out.notes[:] = [notes[0]] * g
    else:
        for j, i in zip(np.flatnonzero(layout >= 0).tolist(), at.tolist(), strict=True):
            out.notes[j] = notes[i]


def solve_group(
    x: FloatArray,
    y: FloatArray,
    dx: FloatArray,
    dy: FloatArray,
    requested: str,
    reach: FloatArray | None = None,
) -> Solution:
    """Measurements with the same site count n, arrays (g, n): shared layouts, then the rest.

    ``reach`` (4,), the box (x_lo, x_hi, y_lo, y_hi) in mm that the models must serve, applies
    the fit guard to all of them; None fits without it.
    """
    g = x.shape[0]
    layout, reps = shared_layouts(x, y)
    if reps.size == 0:
        return _solve_batched(x, y, dx, dy, requested, reach)
    out = Solution(
        np.empty((g, 8)),
        np.empty(g, dtype=np.int64),
        [None] * g,
        np.empty((2, g)),
        np.empty((2, g)),
        np.empty(g, dtype=np.int64),
        np.empty(g),
        np.empty(g),
    )
    _solve_shared(x, y, dx, dy, requested, reach, layout, reps, out)
    rest = np.flatnonzero(layout < 0)
    if rest.size:
        part = _solve_batched(x[rest], y[rest], dx[rest], dy[rest], requested, reach)
        out.terms[rest] = part.terms
        out.choice[rest] = part.choice
        out.mean[:, rest] = part.mean
        out.sum_sq[:, rest] = part.sum_sq
        out.worst[rest] = part.worst
        out.worst_sq[rest] = part.worst_sq
        out.leverage[rest] = part.leverage
        for j, note in zip(rest.tolist(), part.notes, strict=True):
            out.notes[j] = note
    return out
