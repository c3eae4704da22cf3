"""Quiet and trending panels: a two-class model of a component's layer deviations.

A product's panels are not one population. Most are quiet: their layer deviations scatter with
the product's layer-to-layer covariance Sigma_q (offsets, random walks). A minority trend: one
side drifts the same way every layer, or the core's scale grows layer by layer. A single
Gaussian fitted to that mixture is too wide for the quiet panels (false alarms) and too narrow
for the trending ones (misses). Per component c the deviations z (2L slots, A1..AL, B1..BL) are
therefore modelled as

    quiet    (1 - pi):  z ~ N(mu, Sigma_q)
    trending (pi):      z = mu + X beta + e,  e ~ N(0, Sigma_q),  beta ~ N(beta0, diag(psi))

where X (2L x 4) holds, per side, an offset column (1 on that side's slots) and a slope column
(k / L on layer k of that side): a trending panel adds, per side, a persistent offset and a
trend growing with the layer index, so z ~ N(mu + X beta0, Sigma_q + X diag(psi) X^T). A drift
of so many um a layer loads the offset of a translation component; a growing core loads the
slope of the scale. Which of them the product shows, and how strongly, is learned.

Learning: the expectation-maximisation algorithm for a mixture whose second class is a linear
mixed model (Dempster, Laird and Rubin 1977; the mixed-model steps as in Laird and Ware 1982 and
McLachlan and Peel, *Finite Mixture Models*, 2000, ch. 2-3), on the product's complete panels:

- E-step: class posteriors r_i from the two Gaussian likelihoods; for the trending class the
  posterior of beta_i, mean m_i = beta0 + psi X^T Sigma_t^-1 (z_i - mu - X beta0) and covariance
  P = psi - psi X^T Sigma_t^-1 X psi (the Gaussian conditional, Rasmussen and Williams eq. A.6);
- M-step: pi = sum r / (n + k0) (the share shrunk toward 0 by a prior worth k0 panels; the
  forecast adds the prior's own trending share k0 pi0 / (n + k0), so the path from the prior's
  class to the learned one is smooth, see ``ProductHistory.trend_without``); beta0 and psi
  from the r-weighted moments of m_i (psi with a one-panel prior psi0 = w, one layer's
  variance, on offset and slope); mu and Sigma_q from the expected quiet residuals, Sigma_q
  shrunk toward the prior's structure as in ``layer_history``.

A group of components keeps its learned trending class only where the mixture beats one class
by the Bayesian information criterion (Schwarz 1978); otherwise the EM's result is the one-class
model, and the forecast uses the prior's trending class there, with a share that fades as
complete panels accumulate (``layer_history.ProductHistory.trend_without``, which also adds the
prior's weight k0 pi0 to a learned share).
Tx and Ty share one class per panel (``TREND_GROUPS``). Components with no variance (terms the
product does not fit) keep pi = 0.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Final

import numpy as np

from app.overlay.model import FloatArray

#: At most this many EM iterations; the iteration stops once the log-likelihood per panel
#: changes by less than EM_TOLERANCE (nats; the shrinkage and the priors make the steps
#: penalised rather than plain EM, so the change is watched in both directions).
EM_ITERATIONS: Final = 40
EM_TOLERANCE: Final = 1e-3
#: Panels the coefficient-variance prior psi0 counts for.
TREND_PRIOR_PANELS: Final = 1.0
#: Share of panels taken as trending at the start (the EM moves it; EM finds a local optimum,
#: so the start is fixed and deterministic: see ``fit_trend_mixture``).
START_SHARE: Final = 0.1
#: Components that share one class per panel: a drift in some direction is one cause that
#: loads both translations (by the panel's direction), so Tx and Ty are quiet or trending
#: together; each shape component has its own class. Indices into ``COMPONENTS``.
TREND_GROUPS: Final = ((0, 1), (2,), (3,), (4,), (5,), (6,), (7,))
#: GROUP_OF[c]: the first component of c's group (the one whose class draw c uses).
GROUP_OF: Final = np.array([g[0] for c in range(8) for g in TREND_GROUPS if c in g])
_SAME_GROUP: Final = np.array([[float(GROUP_OF[i] == GROUP_OF[j]) for j in range(8)]
                               for i in range(8)])
#: Eigenvalues below this share of the largest are taken as zero (pseudo-inverse).
_PINV_RTOL: Final = 1e-10


def trend_design(layers: int) -> FloatArray:
    """X (2L, 4): columns offset A, slope A, offset B, slope B (slope k / L on layer k)."""
    k = np.arange(1, layers + 1) / layers
    x = np.zeros((2 * layers, 4))
    x[:layers, 0] = 1.0
    x[:layers, 1] = k
    x[layers:, 2] = 1.0
    x[layers:, 3] = k
    return x


def pinv_logdet(s: FloatArray) -> tuple[FloatArray, FloatArray]:
    """Pseudo-inverses and pseudo-log-determinants of a stack of symmetric PSD matrices."""
    w, v = np.linalg.eigh(0.5 * (s + np.swapaxes(s, -1, -2)))
    top = w.max(axis=-1, keepdims=True, initial=0.0)
    keep = (w > _PINV_RTOL * top) & (top > 0.0)
    inv_w = np.where(keep, 1.0 / np.where(keep, w, 1.0), 0.0)
    inv: FloatArray = (v * inv_w[..., None, :]) @ np.swapaxes(v, -1, -2)
    logdet: FloatArray = np.sum(np.where(keep, np.log(np.where(keep, w, 1.0)), 0.0), axis=-1)
    return inv, logdet


@dataclass(frozen=True)
class TrendMixture:
    """The learned two-class model of one product (per component, 8 of them).

    Attributes
    ----------
    share : array, shape (8,)
        pi, the prior probability that a panel trends in that component.
    coef_mean, coef_var : arrays, shape (8, 4)
        beta0 and psi of the trend coefficients (offset A, slope A, offset B, slope B).
    quiet_mean : array, shape (8, 2L)
        mu, the quiet panels' mean deviation per slot.
    quiet_scatter : array, shape (8, 2L, 2L)
        The quiet class's data scatter (n S_shrunk + k0 n / (k0 + n) mu mu^T) for the
        normal-inverse-Wishart posterior of ``layer_history``.
    responsibility : array, shape (N, 8)
        Posterior probability that each learning panel trends.
    iterations : int
    """

    share: FloatArray
    coef_mean: FloatArray
    coef_var: FloatArray
    quiet_mean: FloatArray
    quiet_scatter: FloatArray
    responsibility: FloatArray
    iterations: int

    def trend_mean(self, layers: int) -> FloatArray:
        """X beta0 (8, 2L): what the trending class adds to the mean."""
        out: FloatArray = self.coef_mean @ trend_design(layers).T
        return out

    def trend_cov(self, layers: int) -> FloatArray:
        """X diag(psi) X^T (8, 2L, 2L): what the trending class adds to the covariance."""
        x = trend_design(layers)
        out: FloatArray = np.einsum("ij,cj,kj->cik", x, self.coef_var, x)
        return out


def group_total(values: FloatArray) -> FloatArray:
    """Per component, the sum of ``values`` (..., 8) over its ``TREND_GROUPS`` group."""
    out: FloatArray = values @ _SAME_GROUP
    return out


def _scatter(a: FloatArray) -> FloatArray:
    """sum_n a_n a_n^T per component: (8, d, d) from a (N, 8, d), as a batched matmul."""
    per_comp = np.swapaxes(a, 0, 1)  # (8, N, d)
    out: FloatArray = np.swapaxes(per_comp, 1, 2) @ per_comp
    return out


def _quadratic(dev: FloatArray, inv: FloatArray) -> FloatArray:
    """dev_n^T inv dev_n per panel and component: (N, 8) from dev (N, 8, d), inv (8, d, d)."""
    per_comp = np.swapaxes(dev, 0, 1)  # (8, N, d)
    out: FloatArray = np.swapaxes(np.sum((per_comp @ inv) * per_comp, axis=2), 0, 1)
    return out


def _class_loglik(dev: FloatArray, cov: FloatArray) -> FloatArray:
    """log N(dev; 0, cov) up to the common constant, (N, 8) for dev (N, 8, d), cov (8, d, d)."""
    inv, logdet = pinv_logdet(cov)
    maha = _quadratic(dev, inv)
    out: FloatArray = -0.5 * (logdet[None, :] + maha)
    return out


def shrinkage_intensity(centred: FloatArray, target: FloatArray) -> FloatArray:
    """Intensity lambda (8,) of shrinking a sample covariance toward a structured target.

    S = lambda T + (1 - lambda) S_sample with the estimated optimal intensity
    lambda = sum_ij Var(s_ij) / sum_ij (s_ij - t_ij)^2, clipped to [0, 1], Var(s_ij) from
    the products w_kij = x_ki x_kj of the centred data (Schafer and Strimmer, "A shrinkage
    approach to large-scale covariance matrix estimation", Stat. Appl. Genet. Mol. Biol. 4,
    2005, eq. 10 and section 2.3; the idea is Ledoit and Wolf's). With 24 layers and a few
    hundred panels the sample covariance is noisy enough that its regression of the remaining
    layers on the observed ones over-extrapolates some panels; the target is the prior's
    structure (capability and persistence of the same panels). ``centred`` is (N, 8, p).
    """
    n = centred.shape[0]
    if n < 2:
        return np.ones(target.shape[0])
    # sum_ij sum_k (w_kij - wbar_ij)^2 = sum_k |x_k|^4 - n |wbar|_F^2, without the (N, p, p)
    # array of products.
    wbar = _scatter(centred) / n
    sample = wbar * (n / (n - 1.0))
    norms = np.einsum("nci,nci->nc", centred, centred)
    spread = np.sum(norms**2, axis=0) - n * np.sum(wbar**2, axis=(1, 2))
    var_s = n / (n - 1.0) ** 3 * np.clip(spread, 0.0, None)
    gap = np.sum((sample - target) ** 2, axis=(1, 2))
    out: FloatArray = np.clip(var_s / np.where(gap > 0.0, gap, np.inf), 0.0, 1.0)
    return out


@dataclass
class _Params:
    share: FloatArray  # (8,)
    coef_mean: FloatArray  # (8, 4)
    coef_var: FloatArray  # (8, 4)
    mu: FloatArray  # (8, d)
    data: FloatArray  # (8, d, d) quiet data scatter
    sigma_q: FloatArray  # (8, d, d)


def _m_step(z: FloatArray, r: FloatArray, m: FloatArray, post: FloatArray, x: FloatArray,
            target: FloatArray, psi0: FloatArray, active: np.ndarray, k0: float) -> _Params:
    """Parameters from responsibilities r (N, 8) and the trend coefficients' posterior means
    m (N, 8, 4) and covariance post (8, 4, 4)."""
    n = z.shape[0]
    sr = r.sum(axis=0)
    share = np.where(active, sr / (n + k0), 0.0)
    coef_mean = np.einsum("nc,ncj->cj", r, m) / np.maximum(sr, 1e-12)[:, None]
    spread = np.einsum("nc,ncj->cj", r, (m - coef_mean[None]) ** 2)
    coef_var = (spread + sr[:, None] * np.einsum("cjj->cj", post)
                + TREND_PRIOR_PANELS * psi0) / (sr[:, None] + TREND_PRIOR_PANELS)
    shift = r[:, :, None] * (m @ x.T)  # r_i X m_i
    mu = (z - shift).mean(axis=0)
    u = z - mu
    v = u - m @ x.T
    xpx = np.einsum("ij,cjl,kl->cik", x, post, x)
    ru = np.sqrt(1.0 - r)[:, :, None] * u
    rv = np.sqrt(r)[:, :, None] * v
    scatter = (_scatter(ru) + _scatter(rv)
               + sr[:, None, None] * xpx)
    # Shrinkage intensity from the expected quiet residuals (1 - r) u + r v = u - r X m.
    lam = shrinkage_intensity(u - shift, target)[:, None, None]
    shrunk = lam * target + (1.0 - lam) * scatter / max(n - 1.0, 1.0)
    data = n * shrunk + (k0 * n / (k0 + n)) * np.einsum("ci,cj->cij", mu, mu)
    sigma_q = (k0 * target + data) / (k0 + n)
    return _Params(share, coef_mean, coef_var, mu, data, sigma_q)


def fit_trend_mixture(z: FloatArray, target: FloatArray, layers: int, *,
                      prior_panels: float) -> TrendMixture:
    """Learn the two-class model from complete panels by EM (see the module docstring).

    The iteration starts from a hard split: per component, the ``START_SHARE`` of panels
    whose least-squares offset-and-trend fit X beta carries the most energy are taken as
    trending (a start in the spirit of k-means initialisation; the EM then moves every
    parameter, the split included).

    Parameters
    ----------
    z : array, shape (N, 8, 2L)
        Complete panels' component deviations (tool effects removed), N >= 1.
    target : array, shape (8, 2L, 2L)
        The prior covariance Sigma0 (shrinkage target and prior of Sigma_q).
    layers : int
    prior_panels : float
        k0 = nu0, the prior's weight in panels.
    """
    n, n_comp, _ = z.shape
    x = trend_design(layers)
    k0 = prior_panels
    w_layer = np.einsum("cii->ci", target).mean(axis=1)  # one layer's variance, per component
    active = w_layer > 0.0
    psi0 = np.repeat(w_layer[:, None], 4, axis=1)
    # Start: least-squares trend coefficients of each panel and the top START_SHARE by energy.
    ols = (z - z.mean(axis=0)) @ np.linalg.pinv(x).T  # (N, 8, 4)
    energy = group_total(np.sum((ols @ x.T) ** 2, axis=2) / np.where(active, w_layer, 1.0))
    cut = np.quantile(energy, 1.0 - START_SHARE, axis=0)
    r = ((energy > cut[None]) & active[None]).astype(np.float64)
    one_class = _m_step(z, np.zeros_like(r), ols, np.zeros((n_comp, 4, 4)), x, target, psi0,
                        active, k0)
    params = _m_step(z, r, ols, np.zeros((n_comp, 4, 4)), x, target, psi0, active, k0)
    firsts = np.unique(GROUP_OF[active])
    last = -np.inf
    iterations = 0
    while iterations < EM_ITERATIONS:
        iterations += 1
        log_q, log_t, dev_t, inv_t = _log_classes(z, params, x, active)
        r = np.where(active, 1.0 / (1.0 + np.exp(np.clip(log_q - log_t, -700.0, 700.0))), 0.0)
        total = float(np.sum(np.logaddexp(log_q, log_t)[:, firsts])) / n
        # Posterior of each panel's trend coefficients, were it trending.
        gain = np.einsum("cj,ij,cik->cjk", params.coef_var, x, inv_t)  # psi X^T Sigma_t^-1
        m = params.coef_mean[None] + np.swapaxes(np.swapaxes(dev_t, 0, 1) @ np.swapaxes(
            gain, 1, 2), 0, 1)
        post = (params.coef_var[:, :, None] * np.eye(4)[None]
                - np.einsum("cjk,kl,cl->cjl", gain, x, params.coef_var))
        params = _m_step(z, r, m, post, x, target, psi0, active, k0)
        if abs(total - last) < EM_TOLERANCE:
            break
        last = total
    # Keep the trending class of a group only where it earns its parameters: the mixture's
    # log-likelihood must beat the one-class model's by the Bayesian information criterion's
    # penalty, 0.5 p log n with p = 1 + 8 (components in the group) (Schwarz, "Estimating the
    # dimension of a model", Ann. Statist. 6, 1978). A product whose panels are all quiet then
    # learns the one-class model (the forecast keeps the prior's fading trending class).
    log_q, log_t, _, _ = _log_classes(z, params, x, active)
    gain_ll = np.sum(np.logaddexp(log_q, log_t), axis=0)
    gain_ll = gain_ll - np.sum(_log_classes(z, one_class, x, active)[0], axis=0)
    size = group_total(np.ones(n_comp))
    keep = active & (gain_ll > 0.5 * (1.0 + 8.0 * size) * np.log(max(n, 2)))
    r = np.where(active, 1.0 / (1.0 + np.exp(np.clip(log_q - log_t, -700.0, 700.0))), 0.0)
    r = np.where(keep, r, 0.0)

    def pick(a: FloatArray, b: FloatArray) -> FloatArray:
        out: FloatArray = np.where(keep.reshape((-1,) + (1,) * (a.ndim - 1)), a, b)
        return out

    return TrendMixture(
        share=np.where(keep, params.share, 0.0), coef_mean=pick(params.coef_mean, 0 * ols[0]),
        coef_var=pick(params.coef_var, 0 * psi0), quiet_mean=pick(params.mu, one_class.mu),
        quiet_scatter=pick(params.data, one_class.data), responsibility=r, iterations=iterations,
    )


def _log_classes(z: FloatArray, params: _Params, x: FloatArray, active: np.ndarray,
                 ) -> tuple[FloatArray, FloatArray, FloatArray, FloatArray]:
    """Per panel and component, log((1 - pi) N_q) and log(pi N_t), summed over each trend
    group (up to a constant common to both), the trending deviations and Sigma_t^+."""
    sigma_t = params.sigma_q + np.einsum("ij,cj,kj->cik", x, params.coef_var, x)
    dev_q = z - params.mu
    dev_t = dev_q - params.coef_mean @ x.T
    inv_t, logdet_t = pinv_logdet(sigma_t)
    ll_q = group_total(np.where(active, _class_loglik(dev_q, params.sigma_q), 0.0))
    ll_t = group_total(np.where(active, -0.5 * (logdet_t[None] + _quadratic(dev_t, inv_t)),
                                0.0))
    share = np.where(active, params.share, 0.5)  # inactive: any share, r is set to 0
    with np.errstate(divide="ignore"):
        log_q = np.log1p(-share) + ll_q
        log_t = np.log(share) + ll_t
    return log_q, log_t, dev_t, inv_t
