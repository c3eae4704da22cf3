"""Quiet and trending panels: the EM of ``trend_mixture`` and the mixture forecast."""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from scipy import stats

from app.overlay.forecast import forecast_final
from app.overlay.layer_history import (
    PRIOR_PANELS,
    PRIOR_TREND_SHARE,
    TO_COMPONENTS,
    ProductHistory,
    learn_history,
    limit_variance,
)
from app.overlay.trend_mixture import fit_trend_mixture, pinv_logdet, trend_design

L = 6
PPM = 1e-3
LIMIT_VAR = limit_variance(12.0, 360.0, trapezoid=False)
CENTRE = np.zeros((1, 2))


def panels(n: int, *, share: float, seed: int = 4):
    """n complete panels: translation offset + scatter; scale scatter 1 ppm, and on ``share`` of
    the panels side A's scale grows by g = 0.5-1 ppm a layer (layer k adds g k)."""
    rng = np.random.default_rng(seed)
    t = np.zeros((n, 2, L, 8))
    t[..., :2] = rng.normal(0, 0.5, (n, 2, 1, 2)) + rng.normal(0, 2.0, (n, 2, L, 2))
    t[..., 2:4] = rng.normal(0, 1.0, (n, 2, L, 2)) * PPM
    growing = rng.random(n) < share
    g = rng.uniform(0.5, 1.0, n) * PPM * growing
    t[:, 0, :, 2:4] += (g[:, None] * np.arange(1, L + 1))[..., None]
    return t, growing, g


def learn(t):
    n = len(t)
    return learn_history(t, np.ones((n, 2, L), dtype=bool), np.zeros((n, 2, L), dtype=int),
                         ("T0",), panel_ids=tuple(f"P{i}" for i in range(n)), flip_axis="y",
                         limit_var=LIMIT_VAR)


def test_pseudo_inverse_and_log_determinant_match_numpy():
    rng = np.random.default_rng(0)
    a = rng.normal(size=(3, 5, 5))
    s = a @ np.swapaxes(a, 1, 2) + 0.1 * np.eye(5)
    inv, logdet = pinv_logdet(s)
    # numpy.linalg.inv and slogdet as the outside reference (full rank).
    np.testing.assert_allclose(inv, np.linalg.inv(s), rtol=1e-8, atol=1e-10)
    np.testing.assert_allclose(logdet, np.linalg.slogdet(s)[1], rtol=1e-10)


def test_design_has_an_offset_and_a_slope_per_side():
    x = trend_design(3)
    np.testing.assert_allclose(x[:3, :2], [[1, 1 / 3], [1, 2 / 3], [1, 1]])
    assert not x[:3, 2:].any() and not x[3:, :2].any()


def test_em_finds_the_growing_minority():
    t, growing, g = panels(600, share=0.15)
    h = learn(t)
    # The scale component (2) learns about the true share (shrunk by n / (n + k0)); the quiet
    # components keep one class (BIC).
    assert h.trend_share[2] == pytest.approx(growing.mean() * 600 / (600 + PRIOR_PANELS),
                                             abs=0.03)
    assert h.trend_share[0] == 0.0 and h.trend_share[1] == 0.0
    # Slope on side A: mean g L (the design's slope is k / L), i.e. 0.75 ppm a layer.
    slope_a = h.trend_mean[2, L - 1] - h.trend_mean[2, 0]
    assert slope_a / (L - 1) == pytest.approx(g[growing].mean(), rel=0.15)


def test_responsibilities_are_the_two_class_posterior():
    t, growing, _ = panels(400, share=0.15, seed=8)
    z = np.transpose(t @ TO_COMPONENTS.T, (0, 3, 1, 2)).reshape(400, 8, 2 * L)
    # Per-layer variances of Tx, Ty, iso and aniso scale, rotation, skew (none), Kx, Ky (none).
    var = np.array([4.25, 4.25, 0.5e-6, 0.5e-6, 0.0, 0.0, 0.0, 0.0])
    target = var[:, None, None] * np.eye(2 * L)[None]
    m = fit_trend_mixture(z, target, L, prior_panels=PRIOR_PANELS)
    assert np.mean((m.responsibility[:, 2] > 0.5) == growing) > 0.95
    # Outside check: scipy.stats.multivariate_normal with the learned quiet and trending
    # distributions gives the same posterior for a few panels.
    n = len(z)
    sigma_q = (PRIOR_PANELS * target[2] + m.quiet_scatter[2]) / (PRIOR_PANELS + n)
    x = trend_design(L)
    sigma_t = sigma_q + x @ np.diag(m.coef_var[2]) @ x.T
    pi = m.share[2]
    for i in range(5):
        lq = stats.multivariate_normal.logpdf(z[i, 2], m.quiet_mean[2], sigma_q)
        lt = stats.multivariate_normal.logpdf(z[i, 2], m.quiet_mean[2] + x @ m.coef_mean[2],
                                              sigma_t)
        ref = 1.0 / (1.0 + (1 - pi) / pi * np.exp(lq - lt))
        assert m.responsibility[i, 2] == pytest.approx(ref, abs=1e-6)


def test_quiet_product_keeps_one_class():
    t, _, _ = panels(300, share=0.0)
    assert not learn(t).trend_share.any()


def test_prior_trending_class_and_how_it_fades():
    x = trend_design(L)
    # No complete panel (every panel in process, layers 1-3): the prior's class alone, share
    # pi0 where the component varies, mean 0, X diag(w) X^T with the panel's own layers left out.
    t, _, _ = panels(40, share=0.0)
    have = np.zeros((40, 2, L), dtype=bool)
    have[:, :, :3] = True
    h0 = learn_history(t, have, np.zeros((40, 2, L), dtype=int), ("T0",),
                       panel_ids=tuple(f"P{i}" for i in range(40)), flip_axis="y",
                       limit_var=LIMIT_VAR)
    assert h0.n_complete == 0
    for panel in (None, "P3"):
        share, mean, cov = h0.trend_without(panel)
        w = h0.capability_without(panel)
        np.testing.assert_allclose(share, np.where(w > 0, PRIOR_TREND_SHARE, 0.0))
        assert not mean.any()
        np.testing.assert_allclose(cov, np.einsum("ij,c,kj->cik", x, w, x))
    assert not np.allclose(h0.trend_without(None)[2], h0.trend_without("P3")[2])
    # Quiet history, no learned class: the prior's share fades as pi0 k0 / (k0 + n).
    quiet = learn(panels(300, share=0.0)[0])
    share, _, _ = quiet.trend_without(None)
    w = quiet.capability_without(None)
    fade = PRIOR_TREND_SHARE * PRIOR_PANELS / (PRIOR_PANELS + 300)
    np.testing.assert_allclose(share, np.where(w > 0, fade, 0.0))
    # A learned class keeps its mean and covariance; the prior adds its weight to the share:
    # (sum r + k0 pi0) / (n + k0).
    h = learn(panels(600, share=0.15)[0])
    share, mean, cov = h.trend_without(None)
    fade = PRIOR_TREND_SHARE * PRIOR_PANELS / (PRIOR_PANELS + 600)
    assert share[2] == pytest.approx(h.trend_share[2] + fade)
    np.testing.assert_allclose(mean[2], h.trend_mean[2])
    np.testing.assert_allclose(cov[2], h.trend_cov[2])
    assert share.max() < 1.0


def test_growing_panel_is_forecast_with_its_growth(monkeypatch):
    t, _, _ = panels(600, share=0.15)
    h = learn(t)
    one_class = replace(h, trend_share=np.zeros(8))
    # One class means no prior trending class either (layer_history.trend_without).
    real_trend_without = ProductHistory.trend_without

    def trend_without(self, panel_id):
        share, mean, cov = real_trend_without(self, panel_id)
        return (share if self is not one_class else 0.0 * share), mean, cov

    monkeypatch.setattr(ProductHistory, "trend_without", trend_without)
    fresh, _, _ = panels(400, share=1.0, seed=21)
    z = {"mixture": [], "one class": []}
    weights = []
    for i in range(40):
        obs_a = {k: fresh[i, 0, k - 1] for k in (1, 2, 3)}
        obs_b = {k: fresh[i, 1, k - 1] for k in (1, 2, 3)}
        truth = fresh[i, 0, :, 2].sum() - fresh[i, 1, :, 2].sum()
        for name, hist in (("mixture", h), ("one class", one_class)):
            f = forecast_final(observed_a=obs_a, observed_b=obs_b, history=hist,
                               points_mm=CENTRE, ftb_limit_um=50.0, n_max=500, seed=i)
            sd = np.sqrt(f.final_cov_terms[2, 2])
            z[name].append((truth - f.final_mean_terms[2]) / sd)
            if name == "mixture":
                weights.append(f.trending[2])
    # Half of the way up side A (3 of 6 layers), the growing panels are mostly recognised and
    # the final scale's z is much nearer 0 than with one Gaussian class.
    assert np.median(weights) > 0.8
    assert abs(np.mean(z["mixture"])) < 0.5 < np.mean(z["one class"]) - 0.5
    f = forecast_final(observed_a={1: fresh[0, 0, 0]}, observed_b={}, history=h,
                       points_mm=CENTRE, ftb_limit_um=50.0, n_max=500)
    assert "quiet and trending panels (learned in scale; the prior's elsewhere);" in f.method
    assert "trending" not in forecast_final(
        observed_a={1: fresh[0, 0, 0]}, observed_b={}, history=one_class, points_mm=CENTRE,
        ftb_limit_um=50.0, n_max=500).method


@pytest.mark.parametrize("layers", [1, 2])
@pytest.mark.parametrize("n", [1, 2, 30])
@pytest.mark.parametrize("spread", [0.0, 1.0])
def test_few_panels_short_stacks_and_identical_panels_give_finite_forecasts(layers, n, spread):
    rng = np.random.default_rng(n)
    t = np.zeros((n, 2, layers, 8))
    t[..., :6] = spread * rng.normal(0, 1, (n, 2, layers, 6)) * [2, 2, 1e-3, 1e-3, 1e-3, 1e-3]
    h = learn_history(t, np.ones((n, 2, layers), dtype=bool), np.zeros((n, 2, layers), dtype=int),
                      ("T0",), panel_ids=tuple(f"P{i}" for i in range(n)), flip_axis="y",
                      limit_var=LIMIT_VAR)
    with np.errstate(all="raise"):
        f = forecast_final(observed_a={1: t[0, 0, 0]}, observed_b={}, history=h,
                           points_mm=CENTRE, ftb_limit_um=20.0, n_max=500)
    assert np.isfinite(f.p_exceed) and np.all(np.isfinite(f.final_cov_terms))
    assert np.all((h.trend_share >= 0.0) & (h.trend_share < 1.0))
