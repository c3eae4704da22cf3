"""What a product's panels do layer by layer, learned for the forecast (panel frame).

Components
----------
Terms are handled in the component basis ``COMPONENTS`` = (Tx, Ty, iso scale (Sx + Sy) / 2,
aniso scale (Sx - Sy) / 2, rotation (Ox + Oy) / 2, non-orthogonality Oy - Ox, Kx, Ky)
(conventions.md, per-layer model), in which the usual process causes (a rotated or grown
panel) load one component each. Components are modelled as independent of each other.

Per component, the deviations of a panel's 2L layers (slots A1..AL, B1..BL) form one vector z
with mean mu and covariance Sigma (2L x 2L). An unstructured Sigma learned from complete panels
holds every layer-to-layer pattern the product shows: a constant per-panel offset (all
covariances equal), a random walk of the offset (covariance growing with min(k, l)), growth
layer by layer (covariance growing with k l), and anything between, without choosing a state
model; the forecast then conditions on the layers observed (``forecast.py``).

Learning, from the caller's window of the product's panels
----------------------------------------------------------
- Tool effects: per exposure tool and side, the mean deviation of that tool's layers from the
  layer's mean, in the *tool's own frame* (side B mirrored back, ``frames.mirror_terms``), shrunk
  by credibility n / (n + ``TOOL_CREDIBILITY_ROWS``). Learned from complete panels only.
- Capability w_c: the pooled within-layer variance of each component over every measured layer
  of the window (a panel that has layer k has completed it); the panel being forecast is taken
  out exactly (``ProductHistory.capability_without``).
- Persistence b_c: the covariance of two layers of one side of a panel, by the method of
  moments from the same panels (mean product of two layers' deviations from the layer means),
  blended by pair count with the default b = w tau / (1 + tau), tau = 1 / L (a persistent offset
  that carries as much variance over a side's stack as its independent layers do).
- Prior (a new product): Sigma0 has w on the diagonal and b between two layers of a side, the
  sides independent: the product's own L2L capability and persistence, not its limit. Before
  any layer is measured, w comes from the L2L limit (s = limit / 3 in translation, common
  practice; shape terms a quarter of that at the half-diagonal), blended with the measured
  capability by measurement count (``CAPABILITY_PRIOR_ROWS``).
- Posterior, n complete panels (normal-inverse-Wishart, prior worth ``PRIOR_PANELS`` panels:
  Gelman et al., *Bayesian Data Analysis*, 3rd ed., section 3.6):
  mu = n / (n + k0) zbar, Sigma = (nu0 Sigma0 + S + k0 n / (k0 + n) zbar zbar^T) / (nu0 + n),
  with zbar the quiet mean, S = n S_shrunk, S_shrunk the quiet panels' sample covariance
  shrunk toward the prior's structure (``trend_mixture.shrinkage_intensity``). The path from
  prior to history is smooth in n (credibility), with no switch at a panel count.
- Quiet and trending panels (``trend_mixture``): Sigma and mu above are the quiet class's; a
  share pi of panels adds a per-side offset and layer-index trend, ``trend_mean`` and
  ``trend_cov``, learned by EM from the complete panels. The prior has a trending class too
  (``trend_without``): share PRIOR_TREND_SHARE worth PRIOR_PANELS panels, mean 0 and
  coefficient variance w (one layer's variance) on each offset and slope, so that
  pi = (sum r + k0 pi0) / (n + k0) moves smoothly from the prior to history.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Final

import numpy as np

from app.overlay.errors import OverlayInputError
from app.overlay.frames import mirror_terms
from app.overlay.model import N_TERMS, FloatArray
from app.overlay.trend_mixture import fit_trend_mixture, trend_design

#: Persistent offset of the prior: tau = PRIOR_OFFSET_LAYERS / L (see the module docstring).
PRIOR_OFFSET_LAYERS: Final = 1.0
#: Prior weight in panels (k0 = nu0).
PRIOR_PANELS: Final = 10.0
#: The prior's share of trending panels, worth PRIOR_PANELS panels like the rest of the prior:
#: a new product is assumed to have about one panel in twenty that trends (an assumption, not a
#: measured figure; the product's complete panels replace it), so that a panel whose own layers
#: keep moving one way is extrapolated as trending before the product has any history.
PRIOR_TREND_SHARE: Final = 0.05
#: Tool effect credibility: rows behind an effect for half weight.
TOOL_CREDIBILITY_ROWS: Final = 20.0
#: Pairs of layers behind the persistence estimate for half weight against the default tau.
PERSISTENCE_PRIOR_PAIRS: Final = 50.0
#: Measured layers behind the capability for half weight against the limit-based figure.
CAPABILITY_PRIOR_ROWS: Final = 10.0
#: Shape terms of the limit-based capability: each alone gives this share of l2l/3 at the
#: half-diagonal (the former prior's choice, kept).
PRIOR_SHAPE_FRACTION: Final = 0.25

COMPONENTS: Final = ("Tx", "Ty", "scale", "aniso", "rotation", "skew", "Kx", "Ky")
#: c = TO_COMPONENTS @ t for a term vector t (TERM_NAMES order).
TO_COMPONENTS: Final[FloatArray] = np.array([
    [1.0, 0, 0, 0, 0, 0, 0, 0],
    [0, 1.0, 0, 0, 0, 0, 0, 0],
    [0, 0, 0.5, 0.5, 0, 0, 0, 0],
    [0, 0, 0.5, -0.5, 0, 0, 0, 0],
    [0, 0, 0, 0, 0.5, 0.5, 0, 0],
    [0, 0, 0, 0, -1.0, 1.0, 0, 0],
    [0, 0, 0, 0, 0, 0, 1.0, 0],
    [0, 0, 0, 0, 0, 0, 0, 1.0],
])
FROM_COMPONENTS: Final[FloatArray] = np.asarray(np.linalg.inv(TO_COMPONENTS), dtype=np.float64)


def _frozen(a: FloatArray) -> FloatArray:
    out = np.array(a, dtype=np.float64)
    out.flags.writeable = False
    return out


@dataclass(frozen=True)
class ProductHistory:
    """A product's learned layer history in the component basis (panel frame).

    Attributes
    ----------
    layers : int
        L, layers per side; slots are A1..AL then B1..BL (2L).
    mean : array, shape (8, 2L)
        Expected deviation of each slot for a quiet panel, tool effects removed.
    data_scatter : array, shape (8, 2L, 2L)
        S + k0 n / (k0 + n) zbar zbar^T of the complete panels' expected quiet parts (zeros
        with none; ``trend_mixture``); the quiet Sigma is ``cov_without(panel)``.
    n_complete : int
        Complete panels behind ``mean`` and ``cov`` (0: prior only).
    dof : float
        Effective panels behind the covariance (nu0 + n), for the predictive t.
    tool_effects : dict of str to array, shape (2, 8)
        Per tool, its effect on side A and side B in the tool's own frame (term units).
    tool_kept : array, shape (2L + 1,)
        Entry m: the share of complete panels whose first m measurements (in layer order,
        A before B) were all on one tool that kept that tool for every layer, with Laplace's
        rule of succession ((kept + 1) / (uniform + 2)); the chance that a panel seen on one
        tool so far stays on it.
    tool_var : array, shape (8,)
        Variance of one layer's tool effect over the tools (component basis): what a layer on an
        unknown tool adds.
    flip_axis : str
    capability_rows : array, shape (2L,)
        Measured layers per slot behind the capability statistics.
    capability_sum, capability_sumsq : arrays, shape (8, 2L)
        Sums and sums of squares of the components per slot (for leave-one-out).
    limit_var : array, shape (8,)
        The limit-based per-layer variance.
    panel_ids : tuple of str
        Panels behind the capability statistics, in the order of ``panel_values``.
    panel_values : array, shape (N, 8, 2L)
        Their components (NaN where a slot is not measured).
    pair_sum : array, shape (N, 8)
        Per panel, sum over ordered pairs of distinct measured layers of one side of the product
        of their deviations from the layer means (the persistence statistic).
    pair_count : array, shape (N,)
        Number of those pairs.
    trend_share : array, shape (8,)
        pi, the prior probability that a panel trends in that component
        (``trend_mixture``; 0 with no complete panel).
    trend_mean, trend_cov : arrays, shapes (8, 2L) and (8, 2L, 2L)
        What the trending class adds to ``mean`` and to the quiet covariance.
    """

    layers: int
    mean: FloatArray
    data_scatter: FloatArray
    n_complete: int
    dof: float
    tool_effects: dict[str, FloatArray]
    tool_var: FloatArray
    tool_kept: FloatArray
    flip_axis: str
    capability_rows: FloatArray
    capability_sum: FloatArray
    capability_sumsq: FloatArray
    limit_var: FloatArray
    panel_ids: tuple[str, ...]
    panel_values: FloatArray
    pair_sum: FloatArray
    pair_count: FloatArray
    trend_share: FloatArray
    trend_mean: FloatArray
    trend_cov: FloatArray

    @property
    def source(self) -> str:
        """"prior" with no complete panel, else "history"."""
        return "history" if self.n_complete else "prior"

    def cov_without(self, panel_id: str | None) -> FloatArray:
        """Sigma (8, 2L, 2L), the prior taken without ``panel_id``."""
        w = self.capability_without(panel_id)
        sigma0 = prior_cov(w, self.persistence_without(panel_id, w), self.layers)
        cov = (PRIOR_PANELS * sigma0 + self.data_scatter) / (PRIOR_PANELS + self.n_complete)
        out: FloatArray = 0.5 * (cov + np.swapaxes(cov, 1, 2))
        return out

    def trend_without(self, panel_id: str | None) -> tuple[FloatArray, FloatArray, FloatArray]:
        """The trending class used to forecast ``panel_id``: share (8,), mean (8, 2L), cov (8,
        2L, 2L).

        Where history has learned a trending class (``trend_share`` > 0, which is
        sum r / (n + k0)), the prior adds k0 pi0 / (n + k0) to its share; elsewhere the class
        is the prior's, with that share: mean 0 and X diag(w, w, w, w) X^T, w the component's
        per-layer variance. w is taken without ``panel_id`` (``capability_without``); the
        learned share, mean and covariance come from complete panels only, and a complete
        panel is never forecast, so they never hold the panel either.
        """
        w = self.capability_without(panel_id)
        prior_share = PRIOR_TREND_SHARE * PRIOR_PANELS / (PRIOR_PANELS + self.n_complete)
        learned = self.trend_share > 0.0
        x = trend_design(self.layers)
        prior_cov = np.einsum("ij,c,kj->cik", x, w, x)
        share: FloatArray = np.where(w > 0.0, self.trend_share + prior_share, 0.0)
        mean: FloatArray = np.where(learned[:, None], self.trend_mean, 0.0)
        cov: FloatArray = np.where(learned[:, None, None], self.trend_cov, prior_cov)
        return share, mean, cov

    def persistence_without(self, panel_id: str | None, w: FloatArray) -> FloatArray:
        """Covariance b (8,) of two layers of one side of a panel, ``panel_id`` left out.

        Method of moments on the in-process and complete panels (the mean product of two
        layers' deviations), blended with the default tau = PRIOR_OFFSET_LAYERS / L by pair
        count (``PERSISTENCE_PRIOR_PAIRS``) and kept where the per-side block stays positive
        definite. The panel's own pairs are taken out with the layer means of the whole window
        (their change by one panel is of order 1/N).
        """
        total = self.pair_sum.sum(axis=0)
        pairs = float(self.pair_count.sum())
        if panel_id is not None and panel_id in self.panel_ids:
            i = self.panel_ids.index(panel_id)
            total = total - self.pair_sum[i]
            pairs -= float(self.pair_count[i])
        return _persistence(total, pairs, w, PRIOR_OFFSET_LAYERS / self.layers, self.layers)

    def capability_without(self, panel_id: str | None) -> FloatArray:
        """Per-layer variance w per component (8,), the panel ``panel_id`` left out."""
        rows = self.capability_rows.copy()
        s1 = self.capability_sum.copy()
        s2 = self.capability_sumsq.copy()
        if panel_id is not None and panel_id in self.panel_ids:
            v = self.panel_values[self.panel_ids.index(panel_id)]
            have = np.isfinite(v[0])
            rows = rows - have
            s1 = s1 - np.where(have, v, 0.0)
            s2 = s2 - np.where(have, v * v, 0.0)
        return _capability(rows, s1, s2, self.limit_var)


def _capability(rows: FloatArray, s1: FloatArray, s2: FloatArray,
                limit_var: FloatArray) -> FloatArray:
    use = rows >= 2
    dof = float(np.sum(rows[use] - 1.0))
    if dof <= 0.0:
        return limit_var.copy()
    ss = np.sum(s2[:, use] - s1[:, use] ** 2 / rows[use], axis=1)
    measured = np.clip(ss / dof, 0.0, None)
    weight = dof / (dof + CAPABILITY_PRIOR_ROWS)
    out: FloatArray = weight * measured + (1.0 - weight) * limit_var
    return out


def _persistence(total: FloatArray, pairs: float, w: FloatArray, tau: float,
                 layers: int) -> FloatArray:
    default = w * tau / (1.0 + tau)
    measured = total / pairs if pairs > 0 else default
    weight = pairs / (pairs + PERSISTENCE_PRIOR_PAIRS)
    b = weight * measured + (1.0 - weight) * default
    lowest = -0.9 * w / max(layers - 1, 1)
    out: FloatArray = np.clip(b, lowest, 0.95 * w)
    return out


def limit_variance(l2l_limit_um: float, half_diagonal_mm: float, *, trapezoid: bool) -> FloatArray:
    """Per-layer component variance implied by the L2L limit (see the module docstring)."""
    if not (np.isfinite(l2l_limit_um) and l2l_limit_um > 0.0):
        raise OverlayInputError(f"l2l_limit_um must be positive and finite, got {l2l_limit_um!r}")
    h = half_diagonal_mm
    if not (np.isfinite(h) and h > 0.0):
        raise OverlayInputError(f"half_diagonal_mm must be positive and finite, got {h!r}")
    s = l2l_limit_um / 3.0
    shape = PRIOR_SHAPE_FRACTION * s / h
    trap = PRIOR_SHAPE_FRACTION * s / (0.5 * h * h) if trapezoid else 0.0
    sd_terms = np.array([s, s, shape, shape, shape, shape, trap, trap])
    cov = TO_COMPONENTS @ np.diag(sd_terms**2) @ TO_COMPONENTS.T
    out: FloatArray = np.diag(cov).copy()
    return out


def prior_cov(w: FloatArray, b: FloatArray, layers: int) -> FloatArray:
    """Sigma0 (8, 2L, 2L): per side, variance w on the diagonal and covariance b between two
    layers; the sides independent."""
    eye = np.eye(layers)
    block = (np.asarray(w) - np.asarray(b))[:, None, None] * eye + np.asarray(b)[:, None, None]
    out = np.zeros((N_TERMS, 2 * layers, 2 * layers))
    out[:, :layers, :layers] = block
    out[:, layers:, layers:] = block
    return out


def _components(terms: FloatArray) -> FloatArray:
    out: FloatArray = terms @ TO_COMPONENTS.T
    return out


def learn_history(
    terms: FloatArray,
    present: np.ndarray,
    tools: np.ndarray,
    tool_names: tuple[str, ...],
    *,
    panel_ids: tuple[str, ...],
    flip_axis: str,
    limit_var: FloatArray,
) -> ProductHistory:
    """Learn a product's history from its panels.

    Parameters
    ----------
    terms : array, shape (N, 2, L, 8)
        Fitted terms (panel frame) per panel, side (A, B) and layer; ignored where not present.
    present : bool array, shape (N, 2, L)
    tools : int array, shape (N, 2, L)
        Index into ``tool_names`` of the exposure tool of each layer (-1: unknown).
    tool_names : tuple of str
    panel_ids : tuple of str, length N
    flip_axis : str
        The product's flip axis (to take side B's tool effects back to the tool frame).
    limit_var : array, shape (8,)
        ``limit_variance`` of the product.
    """
    t = np.asarray(terms, dtype=np.float64)
    have = np.asarray(present, dtype=bool)
    if t.ndim != 4 or t.shape[1] != 2 or t.shape[3] != N_TERMS:
        raise OverlayInputError(f"terms must have shape (N, 2, L, 8), got {t.shape}")
    n, _, big_l, _ = t.shape
    if have.shape != (n, 2, big_l) or np.shape(tools) != (n, 2, big_l) or len(panel_ids) != n:
        raise OverlayInputError("present, tools and panel_ids must match terms")
    if big_l < 1:
        raise OverlayInputError("a product needs at least one layer a side")
    t = np.where(have[..., None], t, 0.0)
    if not np.all(np.isfinite(t)):
        raise OverlayInputError("terms must be finite where present")
    tl = np.asarray(tools)
    complete: np.ndarray = np.asarray(have.all(axis=(1, 2)), dtype=np.bool_)
    d = 2 * big_l

    # Tool effects in the tool frame, from complete panels' deviations from the layer mean.
    effects: dict[str, FloatArray] = {}
    tool_var = np.zeros(N_TERMS)
    slot_mean = t[complete].mean(axis=0) if complete.any() else np.zeros((2, big_l, N_TERMS))
    dev = t - slot_mean[None]
    if complete.any():
        for j, name in enumerate(tool_names):
            per_side = np.zeros((2, N_TERMS))
            for s, side in enumerate(("A", "B")):
                rows = complete[:, None] & (tl[:, s, :] == j)
                count = int(rows.sum())
                if not count:
                    continue
                tool_frame = mirror_terms(dev[:, s][rows], side=side, flip_axis=flip_axis)
                per_side[s] = tool_frame.mean(axis=0) * count / (count + TOOL_CREDIBILITY_ROWS)
            effects[name] = per_side
        if effects:
            panel_frame = np.stack([
                np.stack([mirror_terms(e[s], side=side, flip_axis=flip_axis)
                          for s, side in enumerate(("A", "B"))]) for e in effects.values()
            ])  # (tools, 2, 8)
            comp = _components(panel_frame)
            tool_var = np.mean(comp**2, axis=(0, 1))

    # How often a panel seen on one tool so far stays on it (complete panels).
    order = np.stack([tl[:, 0, :], tl[:, 1, :]], axis=2).reshape(n, d)[complete]  # A1 B1 A2..
    same = order == order[:, :1]
    prefix = np.cumprod(same, axis=1).astype(bool)  # first m + 1 on the first one's tool
    whole = prefix[:, -1]
    uniform = np.r_[len(order), len(order), prefix[:, 1:].sum(axis=0)].astype(np.float64)
    kept_n = np.r_[whole.sum(), whole.sum(), (prefix[:, 1:] & whole[:, None]).sum(axis=0)]
    tool_kept = (kept_n + 1.0) / (uniform + 2.0)

    # Per-slot components with the tool effect of the layer's own tool removed.
    own = np.zeros_like(t)
    for j, name in enumerate(tool_names):
        if name in effects:
            for s, side in enumerate(("A", "B")):
                own[:, s][tl[:, s, :] == j] = mirror_terms(effects[name][s], side=side,
                                                           flip_axis=flip_axis)
    comp = _components(t - own)  # (N, 2, L, 8)
    values = np.transpose(comp, (0, 3, 1, 2)).reshape(n, N_TERMS, d)
    slot_have = have.reshape(n, d)
    values = np.where(slot_have[:, None, :], values, np.nan)

    rows = slot_have.sum(axis=0).astype(np.float64)
    s1 = np.nansum(values, axis=0)
    s2 = np.nansum(values**2, axis=0)
    slot_mean = np.where(rows > 0, s1 / np.maximum(rows, 1.0), 0.0)
    devs = np.where(slot_have[:, None, :], values - slot_mean[None], 0.0).reshape(n, N_TERMS, 2,
                                                                                big_l)
    per_side = devs.sum(axis=3)
    pair_sum = (per_side**2 - (devs**2).sum(axis=3)).sum(axis=2)  # sum over k != l of d_k d_l
    m = have.sum(axis=2).astype(np.float64)
    pair_count = (m * (m - 1.0)).sum(axis=1)
    n_c = int(complete.sum())
    if n_c == 0:
        mean, data = np.zeros((N_TERMS, d)), np.zeros((N_TERMS, d, d))
        trend_share, trend_mean, trend_cov = np.zeros(N_TERMS), mean, data
    else:
        z = values[complete]  # (n, 8, d)
        w_all = _capability(rows, s1, s2, np.asarray(limit_var, dtype=np.float64))
        b_all = _persistence(pair_sum.sum(axis=0), float(pair_count.sum()), w_all,
                             PRIOR_OFFSET_LAYERS / big_l, big_l)
        mixture = fit_trend_mixture(z, prior_cov(w_all, b_all, big_l), big_l,
                                    prior_panels=PRIOR_PANELS)
        mean = n_c / (n_c + PRIOR_PANELS) * mixture.quiet_mean
        data = mixture.quiet_scatter
        trend_share = mixture.share
        trend_mean = mixture.trend_mean(big_l)
        trend_cov = mixture.trend_cov(big_l)
    return ProductHistory(
        layers=big_l, mean=_frozen(mean), data_scatter=_frozen(data),
        n_complete=n_c, dof=PRIOR_PANELS + n_c, tool_effects=effects,
        tool_var=_frozen(tool_var), tool_kept=_frozen(tool_kept), flip_axis=flip_axis,
        capability_rows=_frozen(rows),
        capability_sum=_frozen(s1), capability_sumsq=_frozen(s2),
        limit_var=_frozen(np.asarray(limit_var, dtype=np.float64)),
        panel_ids=tuple(panel_ids), panel_values=_frozen(values),
        pair_sum=_frozen(pair_sum), pair_count=_frozen(pair_count),
        trend_share=_frozen(trend_share), trend_mean=_frozen(trend_mean),
        trend_cov=_frozen(trend_cov),
    )
