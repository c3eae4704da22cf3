"""Forecast of a panel's final front-to-back (FTB) overlay from the layers measured so far.

Everything here is in the panel frame (side B already mirrored by the caller), terms in the raw
units and order of ``app.overlay.model`` (Tx, Ty, Sx, Sy, Ox, Oy, Kx, Ky).

Process model
-------------
For one side of one panel, the fitted terms of layer k are

    t_k = mu_k + delta + eps_k,    delta ~ N(0, T),    eps_k ~ N(0, W_k), all independent,

where mu_k is the product's mean for that layer and side, ``delta`` is the panel's *persistent
per-layer offset* (the part that repeats layer after layer on this panel: a drift of the
cumulative stack), T its spread between panels (``LayerHistory.offset_cov``) and W_k the
within-panel layer-to-layer scatter (``LayerHistory.layer_cov``). Sides A and B are
independent. The stack of side S after all L layers is sum_k t_k (DOMAIN.md, accumulation), and
FTB = stack A - stack B.

Estimators
----------
No-history prior (``prior_history``)
    mu_k = 0. W_k is diagonal: the translation sigma per axis is s = l2l_limit / 3 (a process
    that just meets its L2L limit at 3 sigma, common practice). Each scale and rotation term
    alone gives s / 4 at the panel half-diagonal h (sigma = s / (4 h)), each trapezoid term alone
    gives at most s / 4 anywhere within the half-diagonal circle (|x y| <= h^2 / 2 there, so
    sigma = s / (2 h^2)). All eight terms get a positive variance, so the covariance is
    invertible; at a point on the half-diagonal the shape terms together add 2 (1/4)^2 = 12.5 %
    to the translation variance, so a panel built to this prior still meets its L2L limit at
    about 3 sigma everywhere (s * 1.06). A full s per shape term would make the corners of the
    prior panel 1.7 s per axis, i.e. the prior itself would break the L2L limit.
    T = W / L (L = layers per side), not T = W: a persistent offset of that size contributes
    Var(L delta) = L s^2 to a side's stack, as much as the L independent layer errors do, so the
    prior weighs "the panel drifts" and "the panel wanders" equally. It gives the credibility
    factor Z = n / (n + L) below: a third of the panel's own trend is kept half-way up the stack.
    With T = W a panel of a new product (12 + 12 layers, L2L 12 um, FTB 60 um, 25 check points)
    that is exactly on target after one layer a side would have P(exceed) of about 0.7, i.e.
    every panel on hold; with T = W / L it has about 0.15 (watch) and falls below 0.05 by layer 4
    when it stays on target, while a panel drifting 3 um/layer a side (final FTB 72 um) reaches
    P >= 0.2 by layer 3 and one drifting 2 um/layer (final 48 um) stays near 0.13 (watch).

Learned history (``history_from_panels``)
    From the product's recent panels (a rolling window chosen by the caller), per side:

    - mu_k: sample mean of layer k over the panels that have it, when at least ``min_panels``
      (default 20) have it. 20 is the customary minimum of preliminary subgroups for trial
      control limits (20-25, Montgomery, *Introduction to Statistical Quality Control*) and is
      2.5 times the eight terms, so the 8 x 8 sample covariances are of full rank.
    - W_k: within-panel covariance at layer k, from the panel's residuals about its own mean
      deviation, r_ik = e_ik - ebar_i with e_ik = t_ik - mu_k and ebar_i the mean of e_ik over
      the learned layers the panel has (n_i of them, at least 2). E[r r^T] = (1 - 1/n_i) W for a
      common W, so W_k = sum_i r_ik r_ik^T / sum_i (1 - 1/n_i) (the one-way random-effects
      ANOVA "within" estimator), times N_k / (N_k - 1) for the estimated mean. Needs
      ``min_panels`` panels with layer k and another learned layer.
    - T: method of moments on the per-panel means, E[ebar_i ebar_i^T] = T + (1/n_i^2)
      sum_{k in panel i} W_k, so T = sum_i ebar_i ebar_i^T / (N - 1) - mean_i (1/n_i^2)
      sum_k W_k, projected onto the positive semi-definite cone (eigenvalues clipped at zero,
      in correlation scaling so that terms of different units are treated alike). Needs
      ``min_panels`` panels with at least one learned layer.

    Anything with fewer panels comes from the fallback (normally the prior).

Panel offset (``forecast_final``, per side)
    Normal-normal shrinkage of the panel's own deviations e_k = t_k - mu_k (k observed) toward
    the product: the posterior is delta ~ N(m, V) with V = (T^-1 + sum_k W_k^-1)^-1 and
    m = V sum_k W_k^-1 e_k. It is computed as the equivalent sequential (Kalman) update of a
    constant state, one observed layer at a time, S = V + W_k, K = V S^+,
    m <- m + K (e_k - m), V <- (I - K) V (I - K)^T + K W_k K^T (Joseph form), which needs no
    inverse of T or W_k and stays valid when some terms have zero variance (a history without
    trapezoid terms, say). The arithmetic is done with terms scaled to um at the largest
    check-point radius so that the eight terms are of comparable size.

    Credibility weight (``SideTrend.weight``): Z = 1 - tr(V_tt) / tr(T_tt) over the translation
    block; in the scalar case that is n T / (n T + W), the Buhlmann credibility factor, i.e. the
    share of the panel's own mean translation deviation that the forecast keeps.

Remaining layers
    For the set J of layers not yet observed on a side (including missing layers below the top,
    which arrive out of order), sum_J t_j ~ N(sum_J mu_j + |J| m, |J|^2 V + sum_J W_j): the
    offset is shared by all remaining layers (|J|^2), their own errors are independent (|J|).

Final FTB and exceedance
    final = (sum observed A + remaining A) - (sum observed B + remaining B); the covariances of
    the two sides add. P(final worst FTB over the check points > limit) comes from
    ``probability.worst_point_exceedance`` (seeded samples of the eight FTB terms, evaluated at
    the points, plus the per-point residual scatter). With no layer remaining on either side the
    final FTB is the current one and P is 0 or 1, without sampling.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass
from typing import Final

import numpy as np

from app.overlay.errors import OverlayInputError
from app.overlay.model import N_TERMS, FloatArray, evaluate
from app.overlay.probability import WorstPointExceedance, worst_point_exceedance

#: Panels needed before a layer's history replaces the fallback (see module docstring).
MIN_PANELS_DEFAULT: Final = 20
#: Shape terms of the prior: each alone gives this fraction of l2l/3 at the half-diagonal.
PRIOR_SHAPE_FRACTION: Final = 0.25
SOURCES: Final = ("history", "prior", "mixed")

# Relative cut-off of the symmetric pseudo-inverse: directions with less variance than this
# share of the largest carry no information (in the scaled units they are exactly zero or noise).
_PINV_RTOL: Final = 1e-12


def _frozen(a: FloatArray) -> FloatArray:
    out = np.array(a, dtype=np.float64)
    out.flags.writeable = False
    return out


def _symmetric(a: FloatArray) -> FloatArray:
    return 0.5 * (a + np.swapaxes(a, -1, -2))


def _pinv_psd(s: FloatArray) -> FloatArray:
    """Pseudo-inverse of a symmetric positive semi-definite matrix through its eigenvalues."""
    w, v = np.linalg.eigh(_symmetric(s))
    top = float(w.max(initial=0.0))
    keep = w > _PINV_RTOL * top if top > 0.0 else np.zeros_like(w, dtype=bool)
    inv_w = np.zeros_like(w)
    inv_w[keep] = 1.0 / w[keep]
    out: FloatArray = (v * inv_w) @ v.T
    return out


def _clip_psd(c: FloatArray) -> FloatArray:
    """PSD projection in correlation scaling: clip the eigenvalues at zero.

    Terms whose own variance estimate is not positive get zero rows and columns.
    """
    c = _symmetric(c)
    d = np.diag(c).copy()
    ok = d > 0.0
    out = np.zeros_like(c)
    if not ok.any():
        return out
    sd = np.sqrt(d[ok])
    corr = c[np.ix_(ok, ok)] / np.outer(sd, sd)
    w, v = np.linalg.eigh(corr)
    corr = (v * np.clip(w, 0.0, None)) @ v.T
    out[np.ix_(ok, ok)] = corr * np.outer(sd, sd)
    clipped: FloatArray = _symmetric(out)
    return clipped


def _check_finite(name: str, a: FloatArray) -> None:
    if not np.all(np.isfinite(a)):
        bad = np.argwhere(~np.isfinite(a))[0]
        raise OverlayInputError(
            f"{name} has a non-finite value at index {tuple(int(i) for i in bad)}"
        )


@dataclass(frozen=True)
class LayerHistory:
    """What the product's panels do on one side, layer by layer (panel frame).

    Attributes
    ----------
    mean_terms : array, shape (L, 8)
        Mean fitted terms of layers 1..L (index 0 is layer 1).
    layer_cov : array, shape (L, 8, 8)
        Within-panel layer-to-layer covariance W_k of the terms.
    offset_cov : array, shape (8, 8)
        Between-panel covariance T of a panel's persistent per-layer offset.
    n_panels : array of int, shape (L,)
        Panels behind each layer's figures (0 for the prior).
    source : str
        "history", "prior" or "mixed" (some layers from history, some from the fallback).
    """

    mean_terms: FloatArray
    layer_cov: FloatArray
    offset_cov: FloatArray
    n_panels: np.ndarray
    source: str

    def __post_init__(self) -> None:
        mean = np.asarray(self.mean_terms, dtype=np.float64)
        if mean.ndim != 2 or mean.shape[1] != N_TERMS or mean.shape[0] < 1:
            raise OverlayInputError(f"mean_terms must have shape (L, 8), got {mean.shape}")
        n_layers = mean.shape[0]
        layer_cov = np.asarray(self.layer_cov, dtype=np.float64)
        if layer_cov.shape != (n_layers, N_TERMS, N_TERMS):
            raise OverlayInputError(
                f"layer_cov must have shape ({n_layers}, 8, 8), got {layer_cov.shape}"
            )
        offset_cov = np.asarray(self.offset_cov, dtype=np.float64)
        if offset_cov.shape != (N_TERMS, N_TERMS):
            raise OverlayInputError(f"offset_cov must have shape (8, 8), got {offset_cov.shape}")
        n_panels = np.asarray(self.n_panels)
        if n_panels.shape != (n_layers,):
            raise OverlayInputError(f"n_panels must have shape ({n_layers},), got {n_panels.shape}")
        for name, a in (("mean_terms", mean), ("layer_cov", layer_cov), ("offset_cov", offset_cov)):
            _check_finite(name, a)
        if self.source not in SOURCES:
            raise OverlayInputError(f"source must be one of {SOURCES}, got {self.source!r}")
        counts = np.array(n_panels, dtype=np.int64)
        counts.flags.writeable = False
        object.__setattr__(self, "mean_terms", _frozen(mean))
        object.__setattr__(self, "layer_cov", _frozen(_symmetric(layer_cov)))
        object.__setattr__(self, "offset_cov", _frozen(_symmetric(offset_cov)))
        object.__setattr__(self, "n_panels", counts)

    @property
    def layers(self) -> int:
        """Number of layers L."""
        return int(self.mean_terms.shape[0])


def prior_history(
    layers: int, l2l_limit_um: float, *, panel_half_diagonal_mm: float
) -> LayerHistory:
    """The no-history prior built from the L2L limit (see the module docstring for the choice).

    Parameters
    ----------
    layers : int
        Layers per side L.
    l2l_limit_um : float
        The product's layer-to-layer overlay limit; s = l2l_limit_um / 3 per axis.
    panel_half_diagonal_mm : float
        Half the panel diagonal h.

    Returns
    -------
    LayerHistory
        Zero means, W_k = diag(s, s, g s/h (x4), 2 g s/h^2 (x2))^2 with g = 1/4 for every layer,
        T = W / L, ``source`` "prior".
    """
    if isinstance(layers, bool) or not isinstance(layers, int) or layers < 1:
        raise OverlayInputError(f"layers must be a positive integer, got {layers!r}")
    if not (np.isfinite(l2l_limit_um) and l2l_limit_um > 0.0):
        raise OverlayInputError(f"l2l_limit_um must be positive and finite, got {l2l_limit_um!r}")
    h = panel_half_diagonal_mm
    if not (np.isfinite(h) and h > 0.0):
        raise OverlayInputError(f"panel_half_diagonal_mm must be positive and finite, got {h!r}")
    s = l2l_limit_um / 3.0
    g = PRIOR_SHAPE_FRACTION
    shape = g * s / h
    trapezoid = g * s / (0.5 * h * h)  # max |x y| on the half-diagonal circle is h^2 / 2
    sd = np.array([s, s, shape, shape, shape, shape, trapezoid, trapezoid])
    w = np.diag(sd**2)
    return LayerHistory(
        mean_terms=np.zeros((layers, N_TERMS)),
        layer_cov=np.broadcast_to(w, (layers, N_TERMS, N_TERMS)).copy(),
        offset_cov=w / layers,
        n_panels=np.zeros(layers, dtype=np.int64),
        source="prior",
    )


def history_from_panels(
    terms: FloatArray,
    present: np.ndarray,
    *,
    fallback: LayerHistory,
    min_panels: int = MIN_PANELS_DEFAULT,
) -> LayerHistory:
    """Learn one side's layer history from the product's recent panels.

    Parameters
    ----------
    terms : array, shape (N, L, 8)
        Fitted terms of N panels (panel frame); entries where ``present`` is False are ignored
        (they may hold anything, NaN included).
    present : array of bool, shape (N, L)
        Which panel has which layer.
    fallback : LayerHistory
        L layers; used for every figure with fewer than ``min_panels`` panels behind it.
    min_panels : int
        Panels needed per figure (default 20; see the module docstring).

    Returns
    -------
    LayerHistory
        ``source`` "history" when every figure was learned, the fallback's when none was,
        "mixed" otherwise.
    """
    t = np.asarray(terms, dtype=np.float64)
    have = np.asarray(present)
    if t.ndim != 3 or t.shape[2] != N_TERMS:
        raise OverlayInputError(f"terms must have shape (N, L, 8), got {t.shape}")
    n_all, n_layers, _ = t.shape
    if have.shape != (n_all, n_layers) or have.dtype != np.bool_:
        raise OverlayInputError(f"present must be a bool array of shape {(n_all, n_layers)}")
    if fallback.layers != n_layers:
        raise OverlayInputError(
            f"fallback has {fallback.layers} layers, the panels have {n_layers}"
        )
    if isinstance(min_panels, bool) or not isinstance(min_panels, int) or min_panels < 2:
        raise OverlayInputError(f"min_panels must be an integer >= 2, got {min_panels!r}")
    bad = ~np.isfinite(t) & have[..., np.newaxis]
    if bad.any():
        panel, layer, term = (int(n) for n in np.argwhere(bad)[0])
        raise OverlayInputError(
            f"terms of panel {panel}, layer {layer + 1}, term {term} is not finite"
        )

    counts = have.sum(axis=0)
    learned = counts >= min_panels
    mean = fallback.mean_terms.copy()
    layer_cov = fallback.layer_cov.copy()
    offset_cov = fallback.offset_cov.copy()
    n_panels = fallback.n_panels.copy()
    if not learned.any():
        return fallback

    t0 = np.where(have[..., np.newaxis], t, 0.0)
    mean[learned] = t0[:, learned].sum(axis=0) / counts[learned, np.newaxis]
    n_panels[learned] = counts[learned]
    use = have & learned[np.newaxis, :]
    n_i = use.sum(axis=1)
    e = np.where(use[..., np.newaxis], t0 - mean[np.newaxis], 0.0)
    ebar = e.sum(axis=1) / np.maximum(n_i, 1)[:, np.newaxis]
    r = np.where(use[..., np.newaxis], e - ebar[:, np.newaxis, :], 0.0)

    within_learned = np.zeros(n_layers, dtype=bool)
    multi = n_i >= 2
    for k in map(int, np.flatnonzero(learned)):
        sel = use[:, k] & multi
        n_k = int(sel.sum())
        if n_k < min_panels:
            continue
        # One-way ANOVA within estimator: E[r r^T] = (1 - 1/n_i) W; N/(N-1) for the sample mean.
        dof = float(np.sum(1.0 - 1.0 / n_i[sel]))
        rk = r[sel, k]
        layer_cov[k] = (rk.T @ rk) / dof * (counts[k] / (counts[k] - 1.0))
        within_learned[k] = True

    some = n_i >= 1
    n_some = int(some.sum())
    offset_learned = n_some >= min_panels
    if offset_learned:
        # E[ebar ebar^T] = T + (1/n_i^2) sum_{k in panel i} W_k (method of moments).
        eb = ebar[some]
        spread = (eb.T @ eb) / (n_some - 1.0)
        w_sum = np.einsum("il,lab->iab", use[some].astype(np.float64), layer_cov)
        within_part = np.mean(w_sum / (n_i[some] ** 2)[:, np.newaxis, np.newaxis], axis=0)
        offset_cov = _clip_psd(spread - within_part)

    if bool(learned.all() and within_learned.all() and offset_learned):
        source = "history"
    else:
        source = "mixed"
    return LayerHistory(
        mean_terms=mean,
        layer_cov=layer_cov,
        offset_cov=offset_cov,
        n_panels=n_panels,
        source=source,
    )


@dataclass(frozen=True)
class SideTrend:
    """One side's trend so far and what its remaining layers are expected to add (panel frame).

    Attributes
    ----------
    observed_layers, remaining_layers : tuple of int
        Layer numbers (1-based); remaining includes missing layers below the top one observed.
    offset_mean : array, shape (8,)
        Posterior mean m of the panel's persistent per-layer offset.
    offset_cov : array, shape (8, 8)
        Posterior covariance V.
    weight : float
        Credibility factor in [0, 1]: share of the panel's own mean translation deviation kept.
    per_layer_um : tuple of float
        Expected (dx, dy) translation a remaining layer adds: history mean + offset, averaged over
        the remaining layers (over all layers when none remain).
    observed_per_layer_um : tuple of float
        Mean (dx, dy) translation of the observed layers ((0, 0) when none): the panel's drift.
    remaining_mean : array, shape (8,)
        Mean of the sum of the remaining layers' terms.
    remaining_cov : array, shape (8, 8)
        Its covariance.
    """

    observed_layers: tuple[int, ...]
    remaining_layers: tuple[int, ...]
    offset_mean: FloatArray
    offset_cov: FloatArray
    weight: float
    per_layer_um: tuple[float, float]
    observed_per_layer_um: tuple[float, float]
    remaining_mean: FloatArray
    remaining_cov: FloatArray


@dataclass(frozen=True)
class Forecast:
    """Forecast of the final FTB of one panel.

    Attributes
    ----------
    trend_a, trend_b : SideTrend
    current_terms : array, shape (8,)
        FTB terms of the observed layers, sum A - sum B (panel frame).
    final_mean_terms : array, shape (8,)
    final_cov_terms : array, shape (8, 8)
    exceedance : WorstPointExceedance
    final_worst_um : float
        Expected final worst FTB length over the check points.
    band_um : tuple of float
        95 % band (2.5 %, 97.5 %) of the final worst FTB length.
    p_exceed : float
        P(final worst FTB > limit).
    method : str
        One sentence saying how the figure was made.
    complete : bool
        No layer remains on either side: p_exceed is 0 or 1 from the current figure.
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
    method: str
    complete: bool


def _side_trend(
    side: str,
    observed: Mapping[int, FloatArray],
    history: LayerHistory,
    layers_per_side: int,
    scale: FloatArray,
) -> tuple[SideTrend, FloatArray]:
    """The side's trend and the sum of its observed terms, shape (8,)."""
    if history.layers != layers_per_side:
        raise OverlayInputError(
            f"history for side {side} has {history.layers} layers, the product has "
            f"{layers_per_side}"
        )
    obs: dict[int, FloatArray] = {}
    for k, value in observed.items():
        if (
            isinstance(k, bool)
            or not isinstance(k, int | np.integer)
            or not (1 <= k <= layers_per_side)
        ):
            raise OverlayInputError(f"side {side}: layer {k!r} is outside 1..{layers_per_side}")
        v = np.asarray(value, dtype=np.float64)
        if v.shape != (N_TERMS,):
            raise OverlayInputError(
                f"side {side} layer {k}: terms must have shape (8,), got {v.shape}"
            )
        _check_finite(f"side {side} layer {k} terms", v)
        obs[int(k)] = v
    observed_layers = tuple(sorted(obs))
    remaining = tuple(k for k in range(1, layers_per_side + 1) if k not in obs)

    # Sequential normal-normal update in scaled units u = D t (um at the reference radius).
    d = scale
    t_u = history.offset_cov * np.outer(d, d)
    m = np.zeros(N_TERMS)
    v_u = t_u.copy()
    eye = np.eye(N_TERMS)
    for k in observed_layers:
        w_k = history.layer_cov[k - 1] * np.outer(d, d)
        e_k = (obs[k] - history.mean_terms[k - 1]) * d
        gain = v_u @ _pinv_psd(v_u + w_k)
        m = m + gain @ (e_k - m)
        i_k = eye - gain
        v_u = _symmetric(i_k @ v_u @ i_k.T + gain @ w_k @ gain.T)
    offset_mean = m / d
    offset_cov = v_u / np.outer(d, d)

    n_rem = len(remaining)
    idx = [k - 1 for k in remaining]
    remaining_mean = history.mean_terms[idx].sum(axis=0) + n_rem * offset_mean
    remaining_cov = n_rem**2 * offset_cov + history.layer_cov[idx].sum(axis=0)

    prior_t = float(np.trace(history.offset_cov[:2, :2]))
    weight = 1.0 - float(np.trace(offset_cov[:2, :2])) / prior_t if prior_t > 0.0 else 0.0
    weight = min(max(weight, 0.0), 1.0)
    if n_rem:
        per_layer = remaining_mean[:2] / n_rem
    else:
        per_layer = history.mean_terms[:, :2].mean(axis=0) + offset_mean[:2]
    obs_sum = np.sum([obs[k] for k in observed_layers], axis=0) if obs else np.zeros(N_TERMS)
    obs_per_layer = obs_sum[:2] / len(obs) if obs else np.zeros(2)
    trend = SideTrend(
        observed_layers=observed_layers,
        remaining_layers=remaining,
        offset_mean=_frozen(offset_mean),
        offset_cov=_frozen(offset_cov),
        weight=weight,
        per_layer_um=(float(per_layer[0]), float(per_layer[1])),
        observed_per_layer_um=(float(obs_per_layer[0]), float(obs_per_layer[1])),
        remaining_mean=_frozen(remaining_mean),
        remaining_cov=_frozen(_symmetric(remaining_cov)),
    )
    return trend, obs_sum


def _history_phrase(history: LayerHistory) -> str:
    if history.source == "prior":
        return "the no-history prior from the L2L limit"
    counts = history.n_panels[history.n_panels > 0]
    lo, hi = (int(counts.min()), int(counts.max())) if counts.size else (0, 0)
    panels = f"{hi} panels" if lo == hi else f"{lo}-{hi} panels a layer"
    if history.source == "history":
        return f"product history ({panels})"
    return f"product history ({panels}) and the prior where history is short"


def _method(history_a: LayerHistory, history_b: LayerHistory, n_samples: int) -> str:
    phrase_a, phrase_b = _history_phrase(history_a), _history_phrase(history_b)
    toward = phrase_a if phrase_a == phrase_b else f"{phrase_a} on side A, {phrase_b} on side B"
    return (
        f"normal-normal shrinkage of the panel's own per-layer offset toward {toward}; "
        f"{n_samples} seeded samples"
    )


def forecast_final(
    *,
    observed_a: Mapping[int, FloatArray],
    observed_b: Mapping[int, FloatArray],
    history_a: LayerHistory,
    history_b: LayerHistory,
    layers_per_side: int,
    points_mm: FloatArray,
    ftb_limit_um: float,
    point_sigma_um: tuple[float, float] = (0.0, 0.0),
    n_samples: int = 4000,
    seed: int = 0,
) -> Forecast:
    """Forecast the panel's final FTB and the probability that it exceeds the limit.

    Parameters
    ----------
    observed_a, observed_b : mapping of int to array, shape (8,)
        Fitted terms per observed layer (1-based), in the panel frame (side B mirrored).
    history_a, history_b : LayerHistory
        The product's history of each side, ``layers_per_side`` layers each.
    layers_per_side : int
        L.
    points_mm : array, shape (P, 2)
        Check points (x, y) in mm, panel frame.
    ftb_limit_um : float
        FTB limit (vector length), um.
    point_sigma_um : tuple of float
        Per-axis sigma of the final FTB at a point that the model does not explain: the
        root-sum-square of every layer's residual sigma on both sides (check points are not
        measured sites, so observed layers count too).
    n_samples : int
        Monte Carlo samples of the final terms.
    seed : int
        Seed of the samples; the same inputs and seed give the same figures.

    Returns
    -------
    Forecast

    Raises
    ------
    OverlayInputError
        Layer out of 1..L, wrong shapes, non-finite numbers, bad limits or options.
    """
    if (
        isinstance(layers_per_side, bool)
        or not isinstance(layers_per_side, int)
        or (layers_per_side < 1)
    ):
        raise OverlayInputError(
            f"layers_per_side must be a positive integer, got {layers_per_side!r}"
        )
    points = np.asarray(points_mm, dtype=np.float64)
    if points.ndim != 2 or points.shape[1] != 2 or points.shape[0] < 1:
        raise OverlayInputError(f"points_mm must have shape (P, 2) with P >= 1, got {points.shape}")
    _check_finite("points_mm", points)
    if not (np.isfinite(ftb_limit_um) and ftb_limit_um > 0.0):
        raise OverlayInputError(f"ftb_limit_um must be positive and finite, got {ftb_limit_um!r}")
    sigma = np.asarray(point_sigma_um, dtype=np.float64)
    if sigma.shape != (2,) or not np.all(np.isfinite(sigma)) or np.any(sigma < 0.0):
        raise OverlayInputError(
            f"point_sigma_um must be two finite values >= 0, got {point_sigma_um!r}"
        )
    if isinstance(n_samples, bool) or not isinstance(n_samples, int) or n_samples < 1:
        raise OverlayInputError(f"n_samples must be a positive integer, got {n_samples!r}")

    # Terms scaled to um at the largest check-point radius, for a well-conditioned update.
    radius = max(float(np.hypot(points[:, 0], points[:, 1]).max()), 1.0)
    scale = np.array([1.0, 1.0] + [radius] * 4 + [radius * radius] * 2)
    trend_a, sum_a = _side_trend("A", observed_a, history_a, layers_per_side, scale)
    trend_b, sum_b = _side_trend("B", observed_b, history_b, layers_per_side, scale)

    current = sum_a - sum_b
    final_mean = current + trend_a.remaining_mean - trend_b.remaining_mean
    final_cov = _symmetric(trend_a.remaining_cov + trend_b.remaining_cov)
    complete = not trend_a.remaining_layers and not trend_b.remaining_layers
    if complete:
        dx, dy = evaluate(current, points[:, 0], points[:, 1])
        worst = float(np.hypot(dx, dy).max())
        exceedance = WorstPointExceedance(
            p_exceed=1.0 if worst > ftb_limit_um else 0.0,
            stderr=0.0,
            n_samples=0,
            worst_mean_um=worst,
            worst_band_um=(worst, worst),
            seed=seed,
        )
        method = "complete stack: the final FTB is the sum of the measured layers, no forecast"
    else:
        exceedance = worst_point_exceedance(
            final_mean,
            final_cov,
            points,
            float(ftb_limit_um),
            point_sigma_um=(float(sigma[0]), float(sigma[1])),
            n_samples=n_samples,
            seed=seed,
        )
        method = _method(history_a, history_b, n_samples)
    p = float(exceedance.p_exceed)
    lo, hi = (float(b) for b in exceedance.worst_band_um)
    return Forecast(
        trend_a=trend_a,
        trend_b=trend_b,
        current_terms=_frozen(current),
        final_mean_terms=_frozen(final_mean),
        final_cov_terms=_frozen(final_cov),
        exceedance=exceedance,
        final_worst_um=float(exceedance.worst_mean_um),
        band_um=(lo, hi),
        p_exceed=p,
        method=method,
        complete=complete,
    )
