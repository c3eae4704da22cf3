"""Forecast of a panel's final front-to-back (FTB) overlay from the layers measured so far.

Everything is in the panel frame (side B mirrored by the caller); terms in the raw units and
order of ``app.overlay.model``. The product's history (``layer_history.ProductHistory``) gives,
per component c of the term vector, the mean mu and covariance Sigma of a panel's 2L layer
deviations (slots A1..AL, B1..BL), tool effects removed.

What is judged
--------------
The final FTB that judges a panel is the sum of its layer models at the check points
(conventions.md, accumulation): FTB = sum_k t_A,k - sum_k t_B,k. The forecast is of exactly
that quantity; the per-site residual scatter of the fits is not part of it and is not added.

Conditioning, per component
---------------------------
With o the observed slots (deviations z_o, each layer's own tool effect removed) and r the
remaining ones, the Gaussian conditional (e.g. Rasmussen and Williams, *Gaussian Processes for
Machine Learning*, eq. A.6) gives

    E[z_r | z_o] = mu_r + K (z_o - mu_o),   Cov = Sigma_rr - K Sigma_or,   K = Sigma_ro Sigma_oo^+

and the remaining contribution to the FTB component is a^T z_r with a = +1 on side A, -1 on
side B. A panel that keeps drifting one way is caught because Sigma carries the layer-to-layer
persistence the product shows (offsets, random walks, growth), learned rather than assumed.

Quiet and trending panels (``trend_mixture``): the conditional is computed for both classes,
quiet (mu, Sigma) and trending (mu + X beta0, Sigma + X diag(psi) X^T). The class posterior of
each trend group (Tx and Ty together, each shape component alone) is pi f_t / ((1 - pi) f_q +
pi f_t), f the t density of the observed deviations under each class (Bayes' rule; the t
densities as in Kotz and Nadarajah, section 1.1). The forecast of a component is the two-class
mixture: each sample draws its group's class from the posterior, then that class's t; the
reported mean and variance of the final terms are the mixture's moments.

Uncertainty of learned parameters: Sigma is a posterior from ``dof`` = nu0 + n panels, so the
predictive is Student t rather than normal. Conditioning a multivariate t with nu degrees of
freedom on n_o components gives a t with nu + n_o degrees of freedom whose scale is multiplied by
(nu + m) / (nu + n_o), m the Mahalanobis distance of the observed part (Kotz and Nadarajah,
*Multivariate t Distributions and Their Applications*, section 1.11; also Roth, "On the
multivariate t distribution", 2013, eq. 13): a panel unlike the product's panels gets a wider
forecast. The regression K itself is estimated, which adds (1 + n_o / nu) to the variance (the
average leverage p / n of a regression prediction).

Exposure tools
--------------
When every observed layer of the panel (at least two) came from one tool, the remaining layers
are on that tool with the probability q that the history shows for panels seen on one tool for
as many layers (``ProductHistory.tool_kept``): the remaining sum gets q times the tool's learned
effect on each remaining layer, plus the variance of that two-way mixture, q (1 - q) (sum of the
effects)^2, and (1 - q) times the variance of tool effects over the tools per remaining layer.
Otherwise each remaining layer adds the variance of tool effects over the tools.

Probability
-----------
P(final worst FTB over the check points > limit) by seeded Monte Carlo of the eight independent
t components (``probability.adaptive_worst_point_exceedance``): the sample grows near the
thresholds in ``decide_at`` until the level is decided at ``confidence``, and the result carries
its Monte Carlo standard error. With no layer remaining the final FTB is the current one and P is
0 or 1.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Final

import numpy as np

from app.overlay.errors import OverlayInputError
from app.overlay.frames import mirror_terms
from app.overlay.layer_history import (
    COMPONENTS,
    FROM_COMPONENTS,
    TO_COMPONENTS,
    ProductHistory,
)
from app.overlay.model import N_TERMS, FloatArray, evaluate
from app.overlay.probability import WorstPointExceedance, adaptive_worst_point_exceedance
from app.overlay.trend_mixture import GROUP_OF, group_total, pinv_logdet

SIDES: Final = ("A", "B")


def _frozen(a: FloatArray) -> FloatArray:
    out = np.array(a, dtype=np.float64)
    out.flags.writeable = False
    return out


def _conditional(
    mu: FloatArray, cov: FloatArray, slots_o: list[int], slots_r: list[int], z_o: FloatArray,
    a_r: FloatArray,
) -> tuple[FloatArray, FloatArray, FloatArray, FloatArray]:
    """One class's Gaussian conditional of the remaining slots, all eight components at once.

    Returns the conditional mean of the remaining slots (8, r), the variance of a^T z_r (8,),
    the Mahalanobis distance of the observed part m (8,) and the pseudo-log-determinant of
    Sigma_oo (8,).
    """
    s_rr = cov[:, slots_r][:, :, slots_r]
    mean_r = mu[:, slots_r]
    maha = np.zeros(N_TERMS)
    logdet = np.zeros(N_TERMS)
    if slots_o:
        s_ro = cov[:, slots_r][:, :, slots_o]
        s_oo_inv, logdet = pinv_logdet(cov[:, slots_o][:, :, slots_o])
        k_gain = s_ro @ s_oo_inv
        dev = z_o - mu[:, slots_o]
        mean_r = mean_r + np.einsum("cro,co->cr", k_gain, dev)
        s_rr = s_rr - k_gain @ np.swapaxes(s_ro, 1, 2)
        maha = np.einsum("ci,cij,cj->c", dev, s_oo_inv, dev)
    var = np.clip(np.einsum("i,cij,j->c", a_r, s_rr, a_r), 0.0, None)
    return mean_r, var, maha, logdet


@dataclass(frozen=True)
class SideTrend:
    """One side's trend so far and what its remaining layers are expected to add.

    Attributes
    ----------
    observed_layers, remaining_layers : tuple of int
        Layer numbers (1-based); remaining includes missing layers below the top one observed.
    per_layer_um : tuple of float
        Expected (dx, dy) translation a remaining layer adds (history mean + conditional
        deviation + tool); the history mean when none remain.
    observed_per_layer_um : tuple of float
        Mean (dx, dy) translation of the observed layers ((0, 0) when none).
    """

    observed_layers: tuple[int, ...]
    remaining_layers: tuple[int, ...]
    per_layer_um: tuple[float, float]
    observed_per_layer_um: tuple[float, float]


@dataclass(frozen=True)
class Forecast:
    """Forecast of the final FTB of one panel.

    Attributes
    ----------
    trend_a, trend_b : SideTrend
    current_terms : array, shape (8,)
        FTB terms of the observed layers, sum A - sum B.
    final_mean_terms : array, shape (8,)
    final_cov_terms : array, shape (8, 8)
        Covariance of the final terms (t variance scale^2 nu / (nu - 2) per component).
    exceedance : WorstPointExceedance
    final_worst_um : float
        Mean of the final worst FTB length over the check points (from the samples).
    band_um : tuple of float
        95 % band of the final worst FTB length.
    p_exceed, p_stderr : float
        P(final worst FTB > limit) and its Monte Carlo standard error.
    tool : str or None
        The tool whose effect was carried into the remaining layers.
    method : str
        One sentence saying how the figure was made.
    complete : bool
        No layer remains on either side: p_exceed is 0 or 1 from the current figure.
    trending : array, shape (8,)
        Per component, the posterior probability that the panel is of the trending class
        (``trend_mixture``), given its observed layers.
    """

    trend_a: SideTrend
    trend_b: SideTrend
    current_terms: FloatArray
    final_mean_terms: FloatArray
    final_cov_terms: FloatArray
    exceedance: WorstPointExceedance
    final_worst_um: float
    band_um: tuple[float, float]
    p_exceed: float
    p_stderr: float
    tool: str | None
    method: str
    complete: bool
    trending: FloatArray


def _observed(side: str, observed: Mapping[int, FloatArray], layers: int) -> dict[int, FloatArray]:
    out: dict[int, FloatArray] = {}
    for k, value in observed.items():
        if isinstance(k, bool) or not isinstance(k, int | np.integer) or not 1 <= k <= layers:
            raise OverlayInputError(f"side {side}: layer {k!r} is outside 1..{layers}")
        v = np.asarray(value, dtype=np.float64)
        if v.shape != (N_TERMS,) or not np.all(np.isfinite(v)):
            raise OverlayInputError(f"side {side} layer {k}: terms must be 8 finite values")
        out[int(k)] = v
    return out


def _carried_tool(tools: Sequence[Mapping[int, str]], history: ProductHistory) -> str | None:
    names = [name for side in tools for name in side.values()]
    if len(names) >= 2 and len(set(names)) == 1 and names[0] in history.tool_effects:
        return names[0]
    return None


def _tool_panel(history: ProductHistory, tool: str | None, side: int) -> FloatArray:
    """A tool's learned effect on one side, in the panel frame (zeros when unknown)."""
    if tool is None or tool not in history.tool_effects:
        return np.zeros(N_TERMS)
    effect: FloatArray = mirror_terms(history.tool_effects[tool][side], side=SIDES[side],
                                      flip_axis=history.flip_axis)
    return effect


def _method(history: ProductHistory, tool: str | None, ex: WorstPointExceedance,
            share: FloatArray) -> str:
    if history.n_complete:
        source = f"product history of {history.n_complete} complete panels"
    else:
        source = "the new-product prior from the product's own L2L capability"
    carried = f"; exposure tool {tool}'s effect carried into the remaining layers" if tool else ""
    # ``share`` is the trending share used (layer_history.trend_without): the prior's class
    # wherever history has not learned one.
    learned = [name for name, pi in zip(COMPONENTS, history.trend_share, strict=True) if pi > 0]
    parts = [f"learned in {', '.join(learned)}"] if learned else []
    if np.any((share > 0.0) & (history.trend_share == 0.0)):
        parts.append("the prior's elsewhere" if learned else "the prior's")
    classes = f"; quiet and trending panels ({'; '.join(parts)})" if parts else ""
    return (
        f"layer-by-layer conditional forecast from {source}{classes}{carried}; "
        f"{ex.n_samples} seeded samples (Monte Carlo standard error {ex.stderr:.3f})"
    )


def forecast_final(
    *,
    observed_a: Mapping[int, FloatArray],
    observed_b: Mapping[int, FloatArray],
    history: ProductHistory,
    points_mm: FloatArray,
    ftb_limit_um: float,
    tools_a: Mapping[int, str] | None = None,
    tools_b: Mapping[int, str] | None = None,
    panel_id: str | None = None,
    decide_at: tuple[float, ...] = (),
    confidence: float = 0.95,
    n_start: int = 500,
    n_max: int = 16000,
    seed: int = 0,
) -> Forecast:
    """Forecast the panel's final FTB and the probability that it exceeds the limit.

    Parameters
    ----------
    observed_a, observed_b : mapping of int to array, shape (8,)
        Fitted terms per observed layer (1-based), panel frame (side B mirrored).
    history : ProductHistory
        The product's history (``history.layers`` layers a side).
    points_mm : array, shape (P, 2)
        Check points (panel frame, mm).
    ftb_limit_um : float
    tools_a, tools_b : mapping of int to str, optional
        Exposure tool of each observed layer.
    panel_id : str, optional
        The panel's id: its own layers are left out of what the history learned.
    decide_at : tuple of float
        Thresholds of P the level depends on; the Monte Carlo grows until each is decided.
    confidence, n_start, n_max, seed
        See ``adaptive_worst_point_exceedance``.
    """
    layers = history.layers
    points = np.asarray(points_mm, dtype=np.float64)
    if points.ndim != 2 or points.shape[1] != 2 or points.shape[0] < 1:
        raise OverlayInputError(f"points_mm must have shape (P, 2) with P >= 1, got {points.shape}")
    if not np.all(np.isfinite(points)):
        raise OverlayInputError("points_mm must be finite")
    if not (np.isfinite(ftb_limit_um) and ftb_limit_um > 0.0):
        raise OverlayInputError(f"ftb_limit_um must be positive and finite, got {ftb_limit_um!r}")
    obs = [_observed(s, o, layers) for s, o in zip(SIDES, (observed_a, observed_b), strict=True)]
    tools = [dict(t or {}) for t in (tools_a, tools_b)]
    carried = _carried_tool(tools, history)

    sums = [np.sum(list(o.values()), axis=0) if o else np.zeros(N_TERMS) for o in obs]
    current = sums[0] - sums[1]
    slots_o = [s * layers + k - 1 for s in range(2) for k in sorted(obs[s])]
    slots_r = [s * layers + k - 1 for s in range(2) for k in range(1, layers + 1)
               if k not in obs[s]]
    sign = np.array([1.0] * layers + [-1.0] * layers)
    z_o = np.array([TO_COMPONENTS @ (obs[s][k] - _tool_panel(history, tools[s].get(k), s))
                    for s in range(2) for k in sorted(obs[s])]).reshape(-1, N_TERMS).T
    # Tool expected in each remaining slot (component basis), and the unknown-tool variance.
    tool_rem = np.array([TO_COMPONENTS @ _tool_panel(history, carried, i // layers)
                         for i in slots_r]).reshape(-1, N_TERMS).T
    q = float(history.tool_kept[min(len(slots_o), len(history.tool_kept) - 1)]) if carried else 0.0
    carried_sum = tool_rem @ sign[slots_r] if slots_r else np.zeros(N_TERMS)
    tool_rem = q * tool_rem
    unknown_var = (1.0 - q) * float(len(slots_r))

    cov_q = history.cov_without(panel_id)
    nu = history.dof
    n_o = len(slots_o)
    a_r = sign[slots_r]
    # The two classes (quiet, trending) of every component: conditional mean and variance,
    # and the t log-density of the observed part for the class posterior (up to a constant
    # common to both classes).
    pi, trend_mean, trend_cov = history.trend_without(panel_id)
    classes = ((history.mean, cov_q), (history.mean + trend_mean, cov_q + trend_cov))
    means, variances, logliks, mean_rs = [], [], [], []
    for mu_j, cov_j in classes:
        mean_r, var, maha, logdet = _conditional(mu_j, cov_j, slots_o, slots_r, z_o, a_r)
        logliks.append(-0.5 * logdet - 0.5 * (nu + n_o) * np.log1p(maha / nu))
        var = var * (nu + maha) / (nu + n_o) * (1.0 + n_o / nu)
        var = var + unknown_var * history.tool_var + q * (1.0 - q) * carried_sum**2
        means.append(TO_COMPONENTS @ current + (mean_r + tool_rem) @ a_r)
        variances.append(var)
        mean_rs.append(mean_r)
    with np.errstate(divide="ignore"):
        logit = np.log(pi) - np.log1p(-pi) + group_total(logliks[1] - logliks[0])
    trending = np.where(pi > 0.0, 1.0 / (1.0 + np.exp(-np.clip(logit, -700.0, 700.0))), 0.0)
    rem_dev = (1.0 - trending)[:, None] * mean_rs[0] + trending[:, None] * mean_rs[1] + tool_rem
    comp_means = np.stack(means)  # (2, 8)
    comp_scales = np.sqrt(np.stack(variances))
    comp_mean = (1.0 - trending) * comp_means[0] + trending * comp_means[1]
    dof = nu + n_o
    t_factor = dof / (dof - 2.0) if dof > 3.0 else 3.0
    second = ((1.0 - trending) * (comp_scales[0] ** 2 * t_factor + comp_means[0] ** 2)
              + trending * (comp_scales[1] ** 2 * t_factor + comp_means[1] ** 2))
    t_var = np.clip(second - comp_mean**2, 0.0, None)

    final_mean = FROM_COMPONENTS @ comp_mean
    final_cov = FROM_COMPONENTS @ np.diag(t_var) @ FROM_COMPONENTS.T
    complete = not slots_r
    if complete:
        dx, dy = evaluate(current, points[:, 0], points[:, 1])
        worst = float(np.hypot(dx, dy).max())
        exceedance = WorstPointExceedance(
            p_exceed=1.0 if worst > ftb_limit_um else 0.0, stderr=0.0, n_samples=0,
            worst_mean_um=worst, worst_band_um=(worst, worst), seed=seed,
        )
        method = "complete stack: the final FTB is the sum of the measured layers, no forecast"
    else:
        def sampler(rng: np.random.Generator, n: int) -> FloatArray:
            # Student t: normal / sqrt(chi2 / dof), one chi2 per sample for all components
            # (their parameter uncertainty comes from the same panels).
            normal = rng.standard_normal((n, N_TERMS))
            chi = rng.chisquare(dof, (n, 1)) / dof
            # Each trend group's class (quiet or trending, by its posterior), then the t; the
            # components of one group (Tx and Ty) share the draw.
            pick = np.zeros((n, N_TERMS), dtype=np.intp)
            if np.any(trending > 0.0):
                pick = (rng.random((n, N_TERMS))[:, GROUP_OF] < trending).astype(np.intp)
            cols = np.arange(N_TERMS)
            comps = comp_means[pick, cols] + comp_scales[pick, cols] * normal / np.sqrt(chi)
            out: FloatArray = comps @ FROM_COMPONENTS.T
            return out

        exceedance = adaptive_worst_point_exceedance(
            sampler, points, float(ftb_limit_um), decide_at=decide_at, confidence=confidence,
            n_start=n_start, n_max=n_max, seed=seed,
        )
        method = _method(history, carried, exceedance, pi)

    trends = []
    for s in range(2):
        mine = [j for j, i in enumerate(slots_r) if i // layers == s]
        observed_layers = tuple(sorted(obs[s]))
        remaining = tuple(slots_r[j] - s * layers + 1 for j in mine)
        obs_mean = (np.mean([obs[s][k][:2] for k in observed_layers], axis=0)
                    if observed_layers else np.zeros(2))
        if mine:
            per_layer = rem_dev[:2, mine].mean(axis=1)
        else:
            per_layer = history.mean[:2, s * layers:(s + 1) * layers].mean(axis=1)
        trends.append(SideTrend(
            observed_layers=observed_layers, remaining_layers=remaining,
            per_layer_um=(float(per_layer[0]), float(per_layer[1])),
            observed_per_layer_um=(float(obs_mean[0]), float(obs_mean[1])),
        ))
    lo, hi = (float(b) for b in exceedance.worst_band_um)
    return Forecast(
        trend_a=trends[0], trend_b=trends[1], current_terms=_frozen(current),
        final_mean_terms=_frozen(final_mean), final_cov_terms=_frozen(final_cov),
        exceedance=exceedance, final_worst_um=float(exceedance.worst_mean_um), band_um=(lo, hi),
        p_exceed=float(exceedance.p_exceed), p_stderr=float(exceedance.stderr), tool=carried,
        method=method, complete=complete, trending=_frozen(trending),
    )
