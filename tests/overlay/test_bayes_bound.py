"""The Bayes bound of benchmarks/calibration_bayes.py against direct computations.

The bound's per-term conditioning is checked against the Gaussian conditional on the full joint
covariance of all observed terms and the final FTB terms (Rasmussen and Williams, *Gaussian
Processes for Machine Learning*, eq. A.6, with numpy.linalg.solve), the joint built here
independently from the sources of ``line_sim.Line.new_lot``; the drift and growth posterior
weights against scipy.stats.multivariate_normal.logpdf of the whole observation vector; and the
observed terms against those ``line_core.run_core`` hands to the forecast.
"""

from __future__ import annotations

import sys
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
from scipy.stats import multivariate_normal

sys.path.insert(0, str(Path(__file__).resolve().parents[2] / "benchmarks"))

import line_core
from calibration_bayes import grid_cells, observed_lots, posterior, tool_array
from line_core import _fit_sd, run_core
from line_sim import PPM, Line, LineConfig

GRID = (6, 3, 4)


def _source_map(c: LineConfig) -> np.ndarray:
    """Linear map from independent standard normals to every true term (2, layers, 8), quiet
    panel, no tools: offset + walk + scatter on Tx, Ty; scatter on Sx, Sy; rotation on Ox = Oy."""
    big_l = c.layers
    cols = []

    def col() -> np.ndarray:
        m = np.zeros((2, big_l, 8))
        cols.append(m)
        return m

    for s in range(2):
        for a in range(2):
            col()[s, :, a] = c.offset_um
            for j in range(big_l):
                col()[s, j:, a] = c.walk_um
                col()[s, j, a] = c.layer_translation_um
        for j in range(big_l):
            for t in (2, 3):
                col()[s, j, t] = c.layer_scale_ppm * PPM
            m = col()
            m[s, j, 4] = m[s, j, 5] = c.layer_rotation_urad * PPM
    return np.stack([m.ravel() for m in cols], axis=1)


def _joint(c: LineConfig, fit_sd: np.ndarray, k: int):
    """Joint covariance of (observed terms 0..5 of layers 1..k, both sides) and final FTB."""
    big_l = c.layers
    m = _source_map(c)  # (2 * L * 8, sources)
    n_src = m.shape[1]
    sel = np.zeros((2, big_l, 8), dtype=bool)
    sel[:, :k, :6] = True
    obs_rows = m[sel.ravel()]
    noise = np.zeros((obs_rows.shape[0], obs_rows.shape[0]))
    noise[np.diag_indices_from(noise)] = np.broadcast_to(fit_sd[:6], (2, k, 6)).ravel() ** 2
    sign = np.zeros((8, 2, big_l, 8))
    for t in range(8):
        sign[t, 0, :, t] = 1.0
        sign[t, 1, :, t] = -1.0
    f_rows = sign.reshape(8, -1) @ m
    assert f_rows.shape == (8, n_src)
    syy = obs_rows @ obs_rows.T + noise
    sfy = f_rows @ obs_rows.T
    sff = f_rows @ f_rows.T
    return sel, syy, sfy, sff


@pytest.mark.parametrize("k", [1, 3, 7, 12])
def test_gaussian_part_is_the_conditional_of_the_full_joint(k):
    c = replace(LineConfig(), drift_share=0.0, growth_share=0.0)
    line = Line(c, seed=3)
    fit_sd = _fit_sd(line)
    sel, syy, sfy, sff = _joint(c, fit_sd, k)
    rng = np.random.default_rng(k)
    y = rng.multivariate_normal(np.zeros(syy.shape[0]), syy, size=5)  # (5, obs)
    residual = np.zeros((5, 2, c.layers, 8))
    residual[:, sel] = y
    post = posterior(c, fit_sd, residual, np.zeros(8), k, GRID)
    # Rasmussen and Williams eq. A.6 on the full joint, numpy.linalg.solve.
    mean = np.linalg.solve(syy, y.T).T @ sfy.T
    cov = sff - sfy @ np.linalg.solve(syy, sfy.T)
    np.testing.assert_allclose(post.base, mean, rtol=1e-9, atol=1e-9 * np.abs(mean).max())
    np.testing.assert_allclose(post.quiet_cov(), cov, rtol=1e-9, atol=1e-12)


@pytest.mark.parametrize("k", [2, 6])
def test_drift_and_growth_weights_and_shifts_match_the_full_likelihood(k):
    c = replace(LineConfig(), drift_share=0.3, growth_share=0.4)
    line = Line(c, seed=3)
    fit_sd = _fit_sd(line)
    sel, syy, sfy, _sff = _joint(c, fit_sd, k)
    drift_vec, g_values = grid_cells(c, GRID)
    big_l = c.layers
    # An observation from a panel drifting on side B by the fifth cell's vector and growing.
    rng = np.random.default_rng(10 + k)
    mu = np.zeros((2, big_l, 8))
    mu[1, :, :2] += drift_vec[4]
    mu[0, :, 2:4] += g_values[2] * np.arange(1, big_l + 1)[:, None]
    y = rng.multivariate_normal(mu[sel], syy)
    residual = np.zeros((1, 2, big_l, 8))
    residual[0, sel] = y
    post = posterior(c, fit_sd, residual, np.zeros(8), k, GRID)

    def shifted(drift_side: int | None, d: np.ndarray, g: float) -> np.ndarray:
        m = np.zeros((2, big_l, 8))
        if drift_side is not None:
            m[drift_side, :, :2] += d
        m[0, :, 2:4] += g * np.arange(1, big_l + 1)[:, None]
        return m

    cells = drift_vec.shape[0]
    states = [(None, np.zeros(2))] + [(0, d) for d in drift_vec] + [(1, d) for d in drift_vec]
    prior = np.array([1 - c.drift_share] + [c.drift_share / (2 * cells)] * (2 * cells))
    # Drift weights, growth marginalised out: the growth part of the likelihood cancels, so
    # take g = 0 for every drift state (and d = 0 for every growth state below).
    logl = np.array(
        [multivariate_normal.logpdf(y, shifted(s, d, 0.0)[sel], syy) for s, d in states]
    )
    w = prior * np.exp(logl - logl.max())
    np.testing.assert_allclose(np.exp(post.drift_logw[0]), w / w.sum(), rtol=1e-6, atol=1e-12)
    g_states = np.concatenate([[0.0], g_values])
    g_prior = np.array([1 - c.growth_share] + [c.growth_share / g_values.size] * g_values.size)
    logl = np.array(
        [multivariate_normal.logpdf(y, shifted(None, np.zeros(2), g)[sel], syy) for g in g_states]
    )
    w = g_prior * np.exp(logl - logl.max())
    np.testing.assert_allclose(np.exp(post.growth_logw[0]), w / w.sum(), rtol=1e-6, atol=1e-12)
    # The predictive mean in one drift state and one growth state (eq. A.6 with the means).
    sign = np.array([1.0, -1.0])
    for (s, d), cell in ((states[3], 3), (states[cells + 5], cells + 5)):
        for gi in (0, 3):
            m = shifted(s, d, g_states[gi])
            f_mean = np.einsum("s,slt->t", sign, m)
            mean = f_mean + sfy @ np.linalg.solve(syy, y - m[sel])
            got = post.base[0].copy()
            got[:2] += post.drift_shift[cell]
            got[2:4] += post.growth_shift[gi]
            np.testing.assert_allclose(got, mean, rtol=1e-9, atol=1e-12)


def test_tools_and_quiet_structure_match_line_sim():
    c = replace(LineConfig(), drift_share=0.0, growth_share=0.0)
    line = Line(c, seed=5)
    final = []
    for j in range(30):
        lot = line.new_lot(f"T{j:03d}", j, prefix="X")
        tools = tool_array(line, lot)
        assert lot.scatter is not None and lot.walk is not None
        rest = lot.terms - lot.scatter - tools[None]
        np.testing.assert_allclose(rest[..., 2:], 0.0, atol=1e-15)
        offset = rest[..., :2] - lot.walk
        np.testing.assert_allclose(
            offset, np.broadcast_to(offset[:, :, :1], offset.shape), atol=1e-12
        )
        f = lot.terms - tools[None]
        final.append(f[:, 0].sum(axis=1) - f[:, 1].sum(axis=1))
    final = np.concatenate(final)  # 750 quiet panels
    m = _source_map(c)
    sign = np.zeros((8, 2, c.layers, 8))
    for t in range(8):
        sign[t, 0, :, t] = 1.0
        sign[t, 1, :, t] = -1.0
    f_rows = sign.reshape(8, -1) @ m
    var = np.diag(f_rows @ f_rows.T)[:6]
    # 750 draws: the sample variance is within about 3 x sqrt(2 / 750) = 15 % of the model's.
    np.testing.assert_allclose(final[:, :6].var(axis=0), var, rtol=0.16)
    np.testing.assert_allclose(final[:, 4], final[:, 5])


def test_observed_terms_are_run_core_s(monkeypatch):
    line = Line(seed=11)
    seen = {}
    original = line_core.forecast_final

    def spy(**kwargs):
        seen[kwargs["panel_id"]] = (kwargs["observed_a"], kwargs["observed_b"])
        return original(**kwargs)

    monkeypatch.setattr(line_core, "forecast_final", spy)
    run_core(line, lots=2, n_max=500)
    ours = observed_lots(Line(seed=11), 2)
    for lot, noisy in ours:
        for i, serial in enumerate(lot.serials):
            obs_a, obs_b = seen[serial]
            for layer, terms in obs_a.items():
                np.testing.assert_array_equal(terms, noisy[i, 0, layer - 1])
            for layer, terms in obs_b.items():
                np.testing.assert_array_equal(terms, noisy[i, 1, layer - 1])
            assert len(obs_a) == line.config.layers
