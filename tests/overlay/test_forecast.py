"""Forecast of the final FTB: drift scenarios, brute-force and calibration checks, references."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from app.overlay.errors import OverlayInputError
from app.overlay.forecast import (
    LayerHistory,
    forecast_final,
    history_from_panels,
    prior_history,
)
from app.overlay.model import evaluate
from app.overlay.risk import RiskThresholds, assess

PANEL_W, PANEL_H = 510.0, 515.0
HALF_DIAGONAL = 0.5 * float(np.hypot(PANEL_W, PANEL_H))
LAYERS = 12
FTB_LIMIT = 60.0
L2L_LIMIT = 12.0


def check_points(n: int = 5) -> np.ndarray:
    """n x n grid over the panel's central 90 %."""
    xs = np.linspace(-0.45 * PANEL_W, 0.45 * PANEL_W, n)
    ys = np.linspace(-0.45 * PANEL_H, 0.45 * PANEL_H, n)
    return np.array([(x, y) for x in xs for y in ys])


POINTS = check_points()
# Terms scaled to um at the corner of the check grid, so random covariances are realistic.
CORNER = float(np.hypot(*POINTS[0]))
SCALE = np.array([1.0, 1.0] + [CORNER] * 4 + [CORNER**2] * 2)


def translation_layers(values: list[float]) -> dict[int, np.ndarray]:
    """Layers 1..n with Tx = values[k-1] and no other term (panel frame)."""
    return {k: np.array([v, 0, 0, 0, 0, 0, 0, 0.0]) for k, v in enumerate(values, start=1)}


def worst_length(terms: np.ndarray, points: np.ndarray = POINTS) -> float:
    dx, dy = evaluate(terms, points[:, 0], points[:, 1])
    return float(np.hypot(dx, dy).max())


def random_spd(rng: np.random.Generator, sd: np.ndarray, corr_strength: float = 0.4) -> np.ndarray:
    """Random covariance with the given sigmas (in raw units) and moderate correlations."""
    a = rng.standard_normal((8, 8))
    c = np.eye(8) + corr_strength * (a @ a.T) / 8
    d = 1.0 / np.sqrt(np.diag(c))
    corr = c * np.outer(d, d)
    return corr * np.outer(sd, sd)


def random_history(rng: np.random.Generator, layers: int, offset_share: float) -> LayerHistory:
    """A history with layer-dependent means and covariances (all eight terms active)."""
    mean = rng.normal(0.0, 0.6, (layers, 8)) / SCALE
    base_sd = np.array([3.5, 3.0, 1.5, 1.5, 1.0, 1.0, 0.6, 0.6]) / SCALE
    layer_cov = np.array([random_spd(rng, base_sd * (1.0 + 0.05 * k)) for k in range(layers)])
    offset_cov = random_spd(rng, base_sd * np.sqrt(offset_share))
    return LayerHistory(
        mean_terms=mean,
        layer_cov=layer_cov,
        offset_cov=offset_cov,
        n_panels=np.full(layers, 150),
        source="history",
    )


def mc_sigma(p: float, n: int) -> float:
    # Binomial standard error of a Monte Carlo fraction, floored at one count.
    return float(np.sqrt(max(p * (1.0 - p), 1.0 / n) / n))


PRIOR = prior_history(LAYERS, L2L_LIMIT, panel_half_diagonal_mm=HALF_DIAGONAL)


def forecast_translation(values_a: list[float], values_b: list[float], seed: int = 0):
    return forecast_final(
        observed_a=translation_layers(values_a),
        observed_b=translation_layers(values_b),
        history_a=PRIOR,
        history_b=PRIOR,
        layers_per_side=LAYERS,
        points_mm=POINTS,
        ftb_limit_um=FTB_LIMIT,
        seed=seed,
    )


def assess_translation(values_a: list[float], values_b: list[float]):
    fc = forecast_translation(values_a, values_b)
    current = worst_length(fc.current_terms)
    return (
        fc,
        current,
        assess(
            ftb_worst_um=current,
            ftb_worst_at_mm=(0.0, 0.0),
            l2l_worst_a_um={k: abs(v) for k, v in enumerate(values_a, start=1)},
            l2l_worst_b_um={k: abs(v) for k, v in enumerate(values_b, start=1)},
            forecast=fc,
            thresholds=RiskThresholds(ftb_limit_um=FTB_LIMIT, l2l_limit_um=L2L_LIMIT),
        ),
    )


# --- drift scenarios ------------------------------------------------------------------------


def test_drifting_panel_is_at_risk_half_way() -> None:
    # +3 um/layer in +x on A and -3 um/layer in +x on B (panel frame): FTB grows 6 um a pair.
    fc, current, risk = assess_translation([3.0] * 6, [-3.0] * 6)
    # reference: DOMAIN.md, accumulation: FTB = P_A - P_B = 6 * 3 - 6 * (-3) = 36 um
    assert current == pytest.approx(36.0)
    # reference: DOMAIN.md, forecast and risk (a panel that keeps drifting must be caught)
    assert fc.p_exceed >= 0.20
    assert risk.level == "at_risk"
    assert risk.rule == "p_exceed_at_risk"
    assert fc.final_mean_terms[0] > current
    assert fc.band_um[0] <= fc.final_worst_um <= fc.band_um[1]
    assert fc.trend_a.remaining_layers == tuple(range(7, 13))
    assert not fc.complete


@pytest.mark.parametrize("layers", [4, 5, 6])
def test_alternating_panel_stays_clear(layers: int) -> None:
    # Errors that alternate cancel (DOMAIN.md, "Errors that alternate cancel").
    values = [3.0 if k % 2 == 0 else -3.0 for k in range(layers)]
    fc, current, risk = assess_translation(values, [-v for v in values])
    # reference: DOMAIN.md, forecast and risk
    assert current <= 6.0 + 1e-9
    assert fc.p_exceed < 0.05
    assert risk.level == "clear"


def test_prior_weight_is_the_credibility_factor() -> None:
    # reference: Buhlmann credibility Z = n / (n + sigma^2 / tau^2); the prior has tau^2 = s^2/L
    fc = forecast_translation([3.0] * 6, [-3.0] * 6)
    assert fc.trend_a.weight == pytest.approx(6 / (6 + LAYERS))
    # With a zero prior mean the kept translation is Z times the panel's own mean.
    assert fc.trend_a.per_layer_um[0] == pytest.approx(3.0 * 6 / (6 + LAYERS))
    assert fc.trend_a.observed_per_layer_um == pytest.approx((3.0, 0.0))


def test_posterior_matches_the_precision_form() -> None:
    # reference: conjugate multivariate normal posterior (Gelman et al., Bayesian Data Analysis,
    # 3rd ed., sec. 3.5): V = (T^-1 + sum W_k^-1)^-1, m = V sum W_k^-1 e_k
    rng = np.random.default_rng(11)
    hist = random_history(rng, LAYERS, offset_share=0.3)
    observed = {k: hist.mean_terms[k - 1] + rng.normal(0, 2.0, 8) / SCALE for k in (1, 2, 3, 5)}
    fc = forecast_final(
        observed_a=observed,
        observed_b={},
        history_a=hist,
        history_b=hist,
        layers_per_side=LAYERS,
        points_mm=POINTS,
        ftb_limit_um=FTB_LIMIT,
        n_samples=200,
    )
    inv = np.linalg.inv
    precision = inv(hist.offset_cov) + sum(inv(hist.layer_cov[k - 1]) for k in observed)
    v = inv(precision)
    m = v @ sum(
        inv(hist.layer_cov[k - 1]) @ (t - hist.mean_terms[k - 1]) for k, t in observed.items()
    )
    d = np.outer(SCALE, SCALE)
    np.testing.assert_allclose(fc.trend_a.offset_cov * d, v * d, rtol=1e-7, atol=1e-9)
    np.testing.assert_allclose(fc.trend_a.offset_mean * SCALE, m * SCALE, rtol=1e-7, atol=1e-9)
    # A side with no observations keeps the prior: m = 0, V = T.
    np.testing.assert_allclose(fc.trend_b.offset_mean, 0.0)
    np.testing.assert_allclose(fc.trend_b.offset_cov * d, hist.offset_cov * d, atol=1e-12)


# --- brute force: the same process stepped forward layer by layer -------------------------------


def conditional_offset(
    hist: LayerHistory, observed: dict[int, np.ndarray]
) -> tuple[np.ndarray, np.ndarray]:
    """Posterior of the offset from the joint normal of (delta, e_1..e_n), Schur complement form.

    reference: Bishop, Pattern Recognition and Machine Learning, eqs. 2.81-2.82 (conditional
    Gaussian): mu_a|b = S_ab S_bb^-1 x_b, S_a|b = S_aa - S_ab S_bb^-1 S_ba.
    """
    layers = sorted(observed)
    n = len(layers)
    t = hist.offset_cov
    s_ab = np.tile(t, (1, n))
    s_bb = np.tile(t, (n, n))
    for i, k in enumerate(layers):
        s_bb[8 * i : 8 * i + 8, 8 * i : 8 * i + 8] += hist.layer_cov[k - 1]
    x_b = np.concatenate([observed[k] - hist.mean_terms[k - 1] for k in layers])
    gain = np.linalg.solve(s_bb, s_ab.T).T
    return gain @ x_b, t - gain @ s_ab.T


def simulate_final_worst(
    rng: np.random.Generator,
    n: int,
    hist_a: LayerHistory,
    hist_b: LayerHistory,
    observed_a: dict[int, np.ndarray],
    observed_b: dict[int, np.ndarray],
    layer_sigma_um: tuple[float, float],
) -> np.ndarray:
    """Worst final FTB of n simulated panels: each remaining layer drawn and evaluated on its own,
    and every layer's residual scatter drawn at every check point."""
    x, y = POINTS[:, 0], POINTS[:, 1]
    ftb = np.zeros((2, n, len(POINTS)))
    for sign, hist, observed in ((1.0, hist_a, observed_a), (-1.0, hist_b, observed_b)):
        m, v = conditional_offset(hist, observed) if observed else (np.zeros(8), hist.offset_cov)
        delta = rng.multivariate_normal(m, v, size=n, method="eigh")
        for k in range(1, LAYERS + 1):
            if k in observed:
                terms = np.broadcast_to(observed[k], (n, 8))
            else:
                eps = rng.multivariate_normal(np.zeros(8), hist.layer_cov[k - 1], size=n)
                terms = hist.mean_terms[k - 1] + delta + eps
            dx, dy = evaluate(terms, x, y)
            dx = dx + layer_sigma_um[0] * rng.standard_normal(dx.shape)
            dy = dy + layer_sigma_um[1] * rng.standard_normal(dy.shape)
            ftb[0] += sign * dx
            ftb[1] += sign * dy
    return np.hypot(ftb[0], ftb[1]).max(axis=1)


def test_forecast_agrees_with_layer_by_layer_simulation() -> None:
    rng = np.random.default_rng(2024)
    hist_a = random_history(rng, LAYERS, offset_share=0.25)
    hist_b = random_history(rng, LAYERS, offset_share=0.15)
    # A panel with its own offset, side A missing layer 4 (out-of-order arrival).
    delta_a = rng.normal(0.0, 1.5, 8) / SCALE
    delta_b = rng.normal(0.0, 1.5, 8) / SCALE
    observed_a = {
        k: hist_a.mean_terms[k - 1] + delta_a + rng.normal(0.0, 2.0, 8) / SCALE
        for k in (1, 2, 3, 5, 6)
    }
    observed_b = {
        k: hist_b.mean_terms[k - 1] + delta_b + rng.normal(0.0, 2.0, 8) / SCALE for k in (1, 2, 3)
    }
    layer_sigma = (1.2, 0.8)
    # Residual scatter at a check point adds in variance over all 2L layers (DOMAIN.md).
    point_sigma = (layer_sigma[0] * np.sqrt(2 * LAYERS), layer_sigma[1] * np.sqrt(2 * LAYERS))
    n_fc, n_sim = 20000, 20000
    worst = simulate_final_worst(rng, n_sim, hist_a, hist_b, observed_a, observed_b, layer_sigma)
    limit = float(np.quantile(worst, 0.6))  # a limit that gives p near 0.4
    fc = forecast_final(
        observed_a=observed_a,
        observed_b=observed_b,
        history_a=hist_a,
        history_b=hist_b,
        layers_per_side=LAYERS,
        points_mm=POINTS,
        ftb_limit_um=limit,
        point_sigma_um=point_sigma,
        n_samples=n_fc,
        seed=5,
    )
    p_sim = float(np.mean(worst > limit))
    tol = 4.0 * np.hypot(mc_sigma(p_sim, n_sim), mc_sigma(fc.p_exceed, n_fc))
    # reference: brute-force Monte Carlo of the generative model, Bishop PRML eqs. 2.81-2.82
    assert abs(fc.p_exceed - p_sim) <= tol
    assert fc.trend_a.remaining_layers == (4, *range(7, 13))
    assert fc.final_worst_um == pytest.approx(float(worst.mean()), rel=0.03)


# --- calibration against the generative model ---------------------------------------------------


def test_forecast_is_calibrated_on_the_generative_model() -> None:
    rng = np.random.default_rng(7)
    n_panels, observed_layers, n_samples = 2000, 6, 400
    layer_sigma = (1.0, 1.0)
    point_sigma = (np.sqrt(2 * LAYERS) * layer_sigma[0],) * 2
    hist = prior_history(LAYERS, L2L_LIMIT, panel_half_diagonal_mm=HALF_DIAGONAL)
    hist = LayerHistory(
        mean_terms=hist.mean_terms,
        layer_cov=hist.layer_cov,
        offset_cov=hist.layer_cov[0] / 4.0,  # a stronger persistent offset than the prior's
        n_panels=hist.n_panels,
        source="history",
    )
    # t_k = mu_k + delta + eps_k per side (the forecast's own process model).
    sides = []
    for _ in range(2):
        delta = rng.multivariate_normal(np.zeros(8), hist.offset_cov, size=n_panels)
        eps = rng.multivariate_normal(np.zeros(8), hist.layer_cov[0], size=(n_panels, LAYERS))
        sides.append(hist.mean_terms[np.newaxis] + delta[:, np.newaxis, :] + eps)
    terms_a, terms_b = sides
    x, y = POINTS[:, 0], POINTS[:, 1]
    dx, dy = evaluate(terms_a.sum(axis=1) - terms_b.sum(axis=1), x, y)
    dx = dx + point_sigma[0] * rng.standard_normal(dx.shape)
    dy = dy + point_sigma[1] * rng.standard_normal(dy.shape)
    limit = 72.0
    exceeded = np.hypot(dx, dy).max(axis=1) > limit
    p = np.empty(n_panels)
    for i in range(n_panels):
        p[i] = forecast_final(
            observed_a={k: terms_a[i, k - 1] for k in range(1, observed_layers + 1)},
            observed_b={k: terms_b[i, k - 1] for k in range(1, observed_layers + 1)},
            history_a=hist,
            history_b=hist,
            layers_per_side=LAYERS,
            points_mm=POINTS,
            ftb_limit_um=limit,
            point_sigma_um=point_sigma,
            n_samples=n_samples,
            seed=i,
        ).p_exceed
    assert 0.2 <= exceeded.mean() <= 0.5
    # reference: calibration of probability forecasts (Murphy & Winkler 1977): for a correct
    # model E[1{exceed} | data] = p, so sum(1 - p) over any set selected by p has mean zero and
    # variance sum p (1 - p) (1 + 1 / n_samples).
    for selected in (np.ones(n_panels, bool), p < 0.1, (p >= 0.1) & (p < 0.5), p >= 0.5):
        assert selected.sum() >= 100
        diff = float(np.sum(exceeded[selected] - p[selected]))
        sigma = float(np.sqrt(np.sum(p[selected] * (1 - p[selected])) * (1 + 1 / n_samples)))
        assert abs(diff) <= 4.0 * sigma


# --- isotropic translation-only case against the Rice distribution ------------------------------


def test_translation_only_matches_rice() -> None:
    sigma_w, tau = 3.0, 1.2
    zero = np.zeros((8, 8))
    w = zero.copy()
    w[0, 0] = w[1, 1] = sigma_w**2
    t = zero.copy()
    t[0, 0] = t[1, 1] = tau**2
    hist = LayerHistory(
        mean_terms=np.tile([0.5, -0.2, 0, 0, 0, 0, 0, 0.0], (LAYERS, 1)),
        layer_cov=np.broadcast_to(w, (LAYERS, 8, 8)).copy(),
        offset_cov=t,
        n_panels=np.full(LAYERS, 100),
        source="history",
    )
    obs_a = {k: np.array([2.0, 1.0, 0, 0, 0, 0, 0, 0]) for k in range(1, 5)}
    obs_b = {k: np.array([-1.0, 0.5, 0, 0, 0, 0, 0, 0]) for k in range(1, 4)}
    point = np.array([[120.0, -80.0]])
    limit, n_samples = 45.0, 40000
    fc = forecast_final(
        observed_a=obs_a,
        observed_b=obs_b,
        history_a=hist,
        history_b=hist,
        layers_per_side=LAYERS,
        points_mm=point,
        ftb_limit_um=limit,
        n_samples=n_samples,
        seed=3,
    )
    # Scalar normal-normal posterior per axis (reference: Gelman et al., BDA sec. 2.5).
    mean_vec = np.zeros(2)
    var = 0.0
    for sign, obs in ((1.0, obs_a), (-1.0, obs_b)):
        n = len(obs)
        v = 1.0 / (1.0 / tau**2 + n / sigma_w**2)
        e_sum = sum(o[:2] - hist.mean_terms[0, :2] for o in obs.values())
        m = v * e_sum / sigma_w**2
        j = LAYERS - n
        mean_vec += sign * (sum(o[:2] for o in obs.values()) + j * hist.mean_terms[0, :2] + j * m)
        var += j**2 * v + j * sigma_w**2
    s = np.sqrt(var)
    r = float(np.hypot(*mean_vec))
    p_rice = float(stats.rice.sf(limit, r / s, scale=s))
    # reference: scipy.stats.rice (DOMAIN.md: P(|d| > r) = rice.sf(r, R/s, scale=s))
    assert 0.1 < p_rice < 0.9
    assert abs(fc.p_exceed - p_rice) <= 4.0 * mc_sigma(p_rice, n_samples)
    assert np.all(np.isfinite(fc.final_cov_terms))


# --- history -------------------------------------------------------------------------------------


def synthetic_panels(
    rng: np.random.Generator, n: int, layers: int
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    mean = rng.normal(0.0, 1.0, (layers, 8)) / SCALE
    w = random_spd(rng, np.array([3.0, 2.5, 1.5, 1.5, 1.0, 1.0, 0.5, 0.5]) / SCALE)
    t = random_spd(rng, np.array([1.5, 2.0, 1.0, 0.8, 0.7, 0.7, 0.3, 0.3]) / SCALE)
    delta = rng.multivariate_normal(np.zeros(8), t, size=n)
    eps = rng.multivariate_normal(np.zeros(8), w, size=(n, layers))
    terms = mean[np.newaxis] + delta[:, np.newaxis, :] + eps
    # A rolling window holds panels still in process: their top layers are not there yet.
    tops = rng.integers(2, layers + 1, size=n)
    tops[: n // 2] = layers
    present = np.arange(layers)[np.newaxis, :] < tops[:, np.newaxis]
    terms[~present] = np.nan  # absent entries must be ignored
    return terms, present, mean, w, t


def wishart_sigma(cov: np.ndarray, dof: float) -> np.ndarray:
    # reference: Anderson, An Introduction to Multivariate Statistical Analysis, the variance of a
    # sample covariance: Var(S_ij) = (S_ii S_jj + S_ij^2) / dof
    d = np.diag(cov)
    return np.sqrt((np.outer(d, d) + cov**2) / dof)


def test_history_recovers_known_mean_and_covariances() -> None:
    rng = np.random.default_rng(99)
    layers, n = 6, 3000
    terms, present, mean, w, t = synthetic_panels(rng, n, layers)
    hist = history_from_panels(
        terms, present, fallback=prior_history(layers, 12.0, panel_half_diagonal_mm=HALF_DIAGONAL)
    )
    assert hist.source == "history"
    np.testing.assert_array_equal(hist.n_panels, present.sum(axis=0))
    n_i = present.sum(axis=1)
    d = np.outer(SCALE, SCALE)
    for k in range(layers):
        n_k = present[:, k].sum()
        # reference: standard error of a sample mean, sqrt(diag(T + W) / n)
        se = np.sqrt(np.diag(t + w) / n_k)
        assert np.all(np.abs(hist.mean_terms[k] - mean[k]) <= 4.5 * se)
        dof = float(np.sum(1 - 1 / n_i[present[:, k]]))
        assert np.all(np.abs(hist.layer_cov[k] - w) * d <= 4.5 * wishart_sigma(w * d, dof))
    # Method of moments on the panel means: their covariance is about T + W / n_i.
    spread = t + w / n_i.mean()
    assert np.all(np.abs(hist.offset_cov - t) * d <= 4.5 * wishart_sigma(spread * d, n) + 1e-12)
    assert np.all(np.linalg.eigvalsh(hist.offset_cov * d) >= -1e-9)


def test_history_falls_back_below_min_panels() -> None:
    rng = np.random.default_rng(5)
    layers = 6
    terms, present, *_ = synthetic_panels(rng, 60, layers)
    present[:, 4:] = False
    present[:10, 4:] = True  # 10 panels reach layers 5 and 6: fewer than min_panels = 20
    fallback = prior_history(layers, 12.0, panel_half_diagonal_mm=HALF_DIAGONAL)
    hist = history_from_panels(terms, present, fallback=fallback, min_panels=20)
    # reference: the documented threshold (20-25 preliminary subgroups, Montgomery, SQC)
    assert hist.source == "mixed"
    np.testing.assert_array_equal(hist.mean_terms[4:], fallback.mean_terms[4:])
    np.testing.assert_array_equal(hist.layer_cov[4:], fallback.layer_cov[4:])
    np.testing.assert_array_equal(hist.n_panels, [60, *present[:, 1:4].sum(axis=0), 0, 0])
    assert not np.allclose(hist.mean_terms[:4], 0.0)
    # Too few panels anywhere: the fallback itself.
    few = history_from_panels(terms[:15], present[:15], fallback=fallback, min_panels=20)
    assert few is fallback


# --- out of order, complete, inputs -------------------------------------------------------------


def test_missing_layers_are_remaining() -> None:
    rng = np.random.default_rng(1)
    hist = random_history(rng, LAYERS, offset_share=0.2)
    observed = {k: hist.mean_terms[k - 1] + 0.5 for k in (1, 2, 4, 5)}
    fc = forecast_final(
        observed_a=observed,
        observed_b={1: hist.mean_terms[0]},
        history_a=hist,
        history_b=hist,
        layers_per_side=LAYERS,
        points_mm=POINTS,
        ftb_limit_um=FTB_LIMIT,
        n_samples=500,
    )
    remaining = (3, *range(6, 13))
    assert fc.trend_a.observed_layers == (1, 2, 4, 5)
    assert fc.trend_a.remaining_layers == remaining
    # reference: DOMAIN.md, forecast: remaining layers take the history mean of each layer
    expected = (
        sum(hist.mean_terms[j - 1] for j in remaining) + len(remaining) * fc.trend_a.offset_mean
    )
    np.testing.assert_allclose(fc.trend_a.remaining_mean, expected, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(
        fc.current_terms, sum(observed.values()) - hist.mean_terms[0], rtol=1e-12, atol=1e-12
    )


@pytest.mark.parametrize(
    ("per_layer", "expected"),
    [(3.0, 1.0), (2.0, 0.0)],  # FTB 72 um and 48 um against a 60 um limit
)
def test_complete_panel_is_zero_or_one(per_layer: float, expected: float) -> None:
    fc = forecast_translation([per_layer] * LAYERS, [-per_layer] * LAYERS)
    # reference: DOMAIN.md, accumulation (no layers left: the final FTB is the measured sum)
    assert fc.complete
    assert fc.p_exceed == expected
    assert fc.exceedance.stderr == 0.0
    assert fc.final_worst_um == pytest.approx(2 * LAYERS * per_layer)
    assert fc.band_um == (fc.final_worst_um, fc.final_worst_um)


@pytest.mark.parametrize(
    "observed_a",
    [
        {0: np.zeros(8)},
        {LAYERS + 1: np.zeros(8)},
        {1: np.array([np.nan, 0, 0, 0, 0, 0, 0, 0])},
        {1: np.zeros(6)},
    ],
)
def test_bad_observations_are_refused(observed_a: dict[int, np.ndarray]) -> None:
    with pytest.raises(OverlayInputError):
        forecast_final(
            observed_a=observed_a,
            observed_b={},
            history_a=PRIOR,
            history_b=PRIOR,
            layers_per_side=LAYERS,
            points_mm=POINTS,
            ftb_limit_um=FTB_LIMIT,
        )


def test_bad_history_and_options_are_refused() -> None:
    with pytest.raises(OverlayInputError):
        forecast_final(
            observed_a={},
            observed_b={},
            history_a=prior_history(8, 12.0, panel_half_diagonal_mm=HALF_DIAGONAL),
            history_b=PRIOR,
            layers_per_side=LAYERS,
            points_mm=POINTS,
            ftb_limit_um=FTB_LIMIT,
        )
    with pytest.raises(OverlayInputError):
        prior_history(LAYERS, -1.0, panel_half_diagonal_mm=HALF_DIAGONAL)
    with pytest.raises(OverlayInputError):
        LayerHistory(
            mean_terms=np.zeros((3, 8)),
            layer_cov=np.zeros((2, 8, 8)),
            offset_cov=np.zeros((8, 8)),
            n_panels=np.zeros(3, dtype=int),
            source="history",
        )
