"""Layer history learning and the conditional forecast of the final FTB."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from app.overlay.errors import OverlayInputError
from app.overlay.forecast import forecast_final
from app.overlay.frames import mirror_terms
from app.overlay.layer_history import (
    FROM_COMPONENTS,
    PRIOR_PANELS,
    TO_COMPONENTS,
    learn_history,
    limit_variance,
    prior_cov,
)
from app.overlay.probability import adaptive_worst_point_exceedance

L = 4
LIMIT_VAR = limit_variance(12.0, 360.0, trapezoid=False)
CENTRE = np.zeros((1, 2))


def panels(n: int, *, seed: int = 1, offset_sd: float = 1.0, layer_sd: float = 2.0,
           tools: int = 1, bias: np.ndarray | None = None, flip_axis: str = "y"):
    """n complete panels: translation = persistent per-panel offset + layer scatter (+ a tool
    bias fixed in the tool's own frame)."""
    rng = np.random.default_rng(seed)
    t = np.zeros((n, 2, L, 8))
    t[..., :2] = rng.normal(0, offset_sd, (n, 2, 1, 2)) + rng.normal(0, layer_sd, (n, 2, L, 2))
    t[..., 2:6] = rng.normal(0, 1e-3, (n, 2, L, 4))
    tool = rng.integers(tools, size=(n, 2, L))
    if bias is not None:
        for s, side in enumerate(("A", "B")):
            t[:, s] += np.where((tool[:, s] == 0)[..., None],
                                mirror_terms(bias, side=side, flip_axis=flip_axis), 0.0)
    present = np.ones((n, 2, L), dtype=bool)
    ids = tuple(f"P{i}" for i in range(n))
    names = tuple(f"T{j}" for j in range(tools))
    return t, present, tool, names, ids


def learn(t, present, tool, names, ids):
    return learn_history(t, present, tool, names, panel_ids=ids, flip_axis="y",
                         limit_var=LIMIT_VAR)


def test_component_basis_round_trip():
    t = np.arange(1.0, 9.0)
    np.testing.assert_allclose(FROM_COMPONENTS @ (TO_COMPONENTS @ t), t)
    c = TO_COMPONENTS @ t
    assert c[2] == pytest.approx((t[2] + t[3]) / 2) and c[5] == pytest.approx(t[5] - t[4])


def _lambda(h, t):
    """Recover the shrinkage intensity of component 0 from a learned history."""
    n = h.n_complete
    z = np.transpose(t @ TO_COMPONENTS.T, (0, 3, 1, 2)).reshape(n, 8, 2 * L)[:, 0]
    zbar = z.mean(axis=0)
    w = h.capability_without(None)
    sigma0 = prior_cov(w, h.persistence_without(None, w), L)[0]
    k0 = PRIOR_PANELS
    # numpy.cov (ddof 1) as the outside reference for the sample covariance.
    sample = np.cov(z.T)
    shift = k0 * n / (k0 + n) * np.outer(zbar, zbar)
    shrunk = ((k0 + n) * h.cov_without(None)[0] - k0 * sigma0 - shift) / n
    # shrunk = lam sigma0 + (1 - lam) sample: one unknown, least squares over the entries.
    d_target, d_shrunk = (sigma0 - sample).ravel(), (shrunk - sample).ravel()
    lam = float(d_target @ d_shrunk / (d_target @ d_target))
    np.testing.assert_allclose(shrunk, lam * sigma0 + (1 - lam) * sample, atol=1e-9)
    return lam


def test_learned_covariance_is_the_shrunk_sample_covariance_plus_the_prior():
    t, present, tool, names, ids = panels(300)
    h = learn(t, present, tool, names, ids)
    # Here the target (equal covariances) is the truth, so the intensity may reach 1.
    assert -1e-9 <= _lambda(h, t) <= 1.0 + 1e-9
    # The learned translation covariance is near the true one: 1 + 4 delta_kl within a side.
    true = np.kron(np.eye(2), np.ones((L, L)) + 4.0 * np.eye(L))
    assert np.abs(h.cov_without(None)[0] - true).max() < 1.2


def test_shrinkage_fades_when_the_data_disagree_with_the_target():
    # A random walk (covariance min(k, l)) is far from the prior's equal covariances: with many
    # panels the sample covariance wins; with few, the target takes a larger share.
    rng = np.random.default_rng(3)

    def walk(n):
        t = np.zeros((n, 2, L, 8))
        t[..., :2] = np.cumsum(rng.normal(0, 2.0, (n, 2, L, 2)), axis=2)
        t[..., :2] += rng.normal(0, 0.5, (n, 2, L, 2))
        return t

    lams = []
    for n in (30, 3000):
        t = walk(n)
        h = learn(t, np.ones((n, 2, L), dtype=bool), np.zeros((n, 2, L), dtype=int), ("T0",),
                  tuple(f"P{i}" for i in range(n)))
        lams.append(_lambda(h, t))
    assert lams[1] < 0.05 and lams[0] > lams[1]


def test_tool_kept_share_follows_the_history():
    t, present, tool, names, ids = panels(200, tools=4)
    tool[:100] = 2  # half the panels kept on one tool for every layer
    h = learn(t, present, tool, names, ids)
    # After all 2L = 8 measurements on one tool, the panel is on it for good (Laplace's rule).
    assert h.tool_kept[8] == pytest.approx((100 + 1) / (100 + 2))
    # After two: the kept panels plus the random ones whose first two agreed (about 1/4 of 100).
    assert 0.7 < h.tool_kept[2] < 0.86


def test_prior_uses_capability_and_the_limit_before_any_data():
    t, present, tool, names, ids = panels(30, layer_sd=1.0, offset_sd=0.0)
    present[:] = False
    empty = learn(t, present, tool, names, ids)
    np.testing.assert_allclose(empty.capability_without(None), LIMIT_VAR)
    present[:, :, :2] = True  # in process: two layers measured, none complete
    h = learn(t, present, tool, names, ids)
    assert h.n_complete == 0 and h.source == "prior"
    w = h.capability_without(None)
    # Pooled within-slot variance (numpy.var, ddof 1, averaged over the 4 measured slots of
    # equal size), blended with the limit's by measurement count: 116 / (116 + 10).
    measured = np.mean([np.var(t[:, s, k, 0], ddof=1) for s in (0, 1) for k in (0, 1)])
    weight = 116.0 / 126.0
    assert w[0] == pytest.approx(weight * measured + (1 - weight) * LIMIT_VAR[0], rel=1e-9)


def test_capability_leaves_the_panel_out_exactly():
    t, present, tool, names, ids = panels(40)
    present[:, :, 3] = False
    h = learn(t, present, tool, names, ids)
    keep = np.arange(40) != 7
    without = learn(t[keep], present[keep], tool[keep], names, tuple(np.array(ids)[keep]))
    np.testing.assert_allclose(h.capability_without("P7"), without.capability_without(None),
                               rtol=1e-10)


def test_tool_bias_is_learned_in_the_tools_own_frame():
    bias = np.array([1.5, -0.8, 0, 0, 0, 0, 0, 0])  # tool frame
    t, present, tool, names, ids = panels(400, tools=3, bias=bias, layer_sd=1.0, offset_sd=0.0)
    h = learn(t, present, tool, names, ids)
    for side in (0, 1):
        effect = h.tool_effects["T0"][side][:2]
        others = np.mean([h.tool_effects[k][side][:2] for k in ("T1", "T2")], axis=0)
        # Relative to the other tools the effect is the bias, the same on both sides in the
        # tool frame (side B mirrored back); layer mean and shrinkage absorb a little.
        np.testing.assert_allclose(effect - others, bias[:2], atol=0.2)


def test_tool_effect_is_carried_into_the_remaining_layers_in_the_tools_own_frame():
    # A bias of +1.5 um in x and -0.8 um in y in the tool's own frame on both sides. Side B is
    # turned about y, so in the panel frame side B's x bias is -1.5: front to back the x bias
    # adds up over both sides' remaining layers, the y bias cancels (conventions.md, frames).
    bias = np.array([1.5, -0.8, 0, 0, 0, 0, 0, 0])
    t, present, tool, names, ids = panels(600, tools=3, layer_sd=1.0, offset_sd=0.0)
    tool[:300] = tool[:300, :1, :1]  # half the panels kept on one tool for every layer
    for s, side in enumerate(("A", "B")):
        t[:, s] += np.where((tool[:, s] == 0)[..., None],
                            mirror_terms(bias, side=side, flip_axis="y"), 0.0)
    h = learn(t, present, tool, names, ids)
    zero = {1: np.zeros(8)}
    means = {}
    for name in ("T0", "T1"):
        f = forecast_final(observed_a=zero, observed_b=zero, tools_a={1: name},
                           tools_b={1: name}, history=h, points_mm=CENTRE, ftb_limit_um=50.0)
        assert f.tool == name
        means[name] = f.final_mean_terms
    q = h.tool_kept[2]
    remaining = 2 * (L - 1)
    effect = h.tool_effects["T0"][:, :2] - h.tool_effects["T1"][:, :2]  # (side, x/y), tool frame
    gap = means["T0"][:2] - means["T1"][:2]
    assert gap[0] == pytest.approx(q * remaining * effect[:, 0].mean(), rel=0.05)
    assert gap[0] == pytest.approx(q * remaining * bias[0], rel=0.25)
    assert abs(gap[1]) < 0.1 * q * remaining * abs(bias[1])


def _history(n=3000, **kw):
    return learn(*panels(n, **kw))


def test_conditional_mean_matches_a_regression_on_samples():
    h = _history(4000)
    observed = {1: np.array([3.0, -2.0, 0, 0, 0, 0, 0, 0]), 2: np.array([2.5, -1.0, 0, 0, 0, 0,
                                                                         0, 0])}
    f = forecast_final(observed_a=observed, observed_b={}, history=h, points_mm=CENTRE,
                       ftb_limit_um=50.0, seed=3)
    # Outside check: regress the remaining FTB sum on the observed layers over simulated
    # panels of the same process (numpy.linalg.lstsq); its prediction is the conditional mean.
    t, *_ = panels(40000, seed=9)
    x = np.c_[np.ones(40000), t[:, 0, 0, 0], t[:, 0, 1, 0]]
    y = t[:, 0, 2:, 0].sum(axis=1) - t[:, 1, :, 0].sum(axis=1)
    beta = np.linalg.lstsq(x, y, rcond=None)[0]
    expected = 3.0 + 2.5 + beta @ [1.0, 3.0, 2.5]
    assert f.final_mean_terms[0] == pytest.approx(expected, abs=0.15)


def test_probability_at_one_point_matches_rice():
    h = _history(4000)
    f = forecast_final(observed_a={1: np.array([6.0, 0, 0, 0, 0, 0, 0, 0])}, observed_b={},
                       history=h, points_mm=CENTRE, ftb_limit_um=14.0, n_start=40000,
                       n_max=40000, seed=5)
    m = f.final_mean_terms[:2]
    s = np.sqrt(np.diag(f.final_cov_terms)[:2])
    assert s[0] == pytest.approx(s[1], rel=0.05)
    # scipy.stats.rice: P(|d| > r) for an isotropic normal (the t has ~4000 degrees of freedom).
    ref = stats.rice.sf(14.0, np.hypot(*m) / s.mean(), scale=s.mean())
    assert abs(f.p_exceed - ref) < 4 * f.p_stderr + 0.005


def test_drifting_panel_is_more_at_risk_than_one_on_target():
    h = _history(500)
    drift = {k: np.array([3.5, 0, 0, 0, 0, 0, 0, 0]) for k in (1, 2)}
    target = {k: np.zeros(8) for k in (1, 2)}
    p = [forecast_final(observed_a=o, observed_b={k: -v for k, v in o.items()}, history=h,
                        points_mm=CENTRE, ftb_limit_um=20.0, seed=1).p_exceed
         for o in (drift, target)]
    # Current FTB 14 um; a third of the drift is expected to go on (offset 1 vs layer 4 um^2).
    assert p[0] > 0.3 and p[1] < 0.01


def test_new_product_on_target_is_not_at_risk():
    t, present, tool, names, ids = panels(50)
    present[:, :, 1:] = False  # a new product: layer 1 measured on 50 panels, none complete
    h = learn(t, present, tool, names, ids)
    f = forecast_final(observed_a={1: np.zeros(8)}, observed_b={1: np.zeros(8)}, history=h,
                       points_mm=CENTRE, ftb_limit_um=30.0, panel_id="P0")
    assert f.p_exceed < 0.05 and "prior" in f.method


def test_monte_carlo_grows_near_a_threshold_and_reports_its_error():
    def sampler(rng, n):
        out = np.zeros((n, 8))
        out[:, 0] = rng.normal(0.0, 1.0, n)
        return out

    # P(|x| > 1.2816) = 0.2 for a standard normal (scipy.stats.norm.isf(0.1)).
    r = float(stats.norm.isf(0.1))
    near = adaptive_worst_point_exceedance(sampler, CENTRE, r, decide_at=(0.2,), n_max=8000)
    far = adaptive_worst_point_exceedance(sampler, CENTRE, 4.0, decide_at=(0.2,), n_max=8000)
    assert far.n_samples == 500 and far.decided
    assert near.n_samples == 8000 and not near.decided
    assert near.stderr == pytest.approx(np.sqrt(0.2 * 0.8 / 8000), rel=0.1)
    assert abs(near.p_exceed - 0.2) < 4 * near.stderr


def test_complete_stack_needs_no_samples_and_bad_input_is_refused():
    h = _history(50)
    full = {k: np.zeros(8) for k in range(1, L + 1)}
    f = forecast_final(observed_a=full, observed_b=full, history=h, points_mm=CENTRE,
                       ftb_limit_um=10.0)
    assert f.complete and f.p_exceed == 0.0 and f.exceedance.n_samples == 0
    with pytest.raises(OverlayInputError, match="outside"):
        forecast_final(observed_a={L + 1: np.zeros(8)}, observed_b={}, history=h,
                       points_mm=CENTRE, ftb_limit_um=10.0)
    with pytest.raises(OverlayInputError, match="finite"):
        forecast_final(observed_a={1: np.full(8, np.nan)}, observed_b={}, history=h,
                       points_mm=CENTRE, ftb_limit_um=10.0)
