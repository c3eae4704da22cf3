"""Variance components by ANOVA, checked against statsmodels' REML mixed model."""

from __future__ import annotations

import numpy as np
import pytest

from app.overlay.components import variance_components
from app.overlay.errors import OverlayInputError


def _balanced(seed: int, tools: int = 5, lots: int = 4, panels: int = 5, layers: int = 6):
    rng = np.random.default_rng(seed)
    sd = {"tool": 2.0, "lot": 1.0, "panel": 1.5, "layer": 1.2}
    rows = []
    for t in range(tools):
        a = rng.normal(0, sd["tool"])
        for lot in range(lots):
            b = rng.normal(0, sd["lot"])
            for p in range(panels):
                c = rng.normal(0, sd["panel"])
                for _ in range(layers):
                    rows.append((t, lot, p, 3.0 + a + b + c + rng.normal(0, sd["layer"])))
    arr = np.array(rows)
    return arr[:, 0].astype(int), arr[:, 1].astype(int), arr[:, 2].astype(int), arr[:, 3]


@pytest.mark.parametrize("seed", [1, 2, 3])
def test_nested_components_match_statsmodels_reml_on_balanced_data(seed: int) -> None:
    sm = pytest.importorskip("statsmodels.formula.api")
    pd = pytest.importorskip("pandas")
    tool, lot, panel, y = _balanced(seed)
    ours = variance_components(y, [tool, lot, panel])
    if ours.truncated.any():
        pytest.skip("a negative moment estimate: ANOVA and REML differ by construction")
    frame = pd.DataFrame({"y": y, "tool": tool, "lot": tool * 100 + lot,
                          "panel": (tool * 100 + lot) * 100 + panel})
    # Outside check: statsmodels MixedLM (REML), tool as the group, lot and panel as nested
    # variance components. On balanced nested data REML equals the ANOVA estimates when none
    # is negative (Searle, Casella and McCulloch, Variance Components, from memory).
    model = sm.mixedlm("y ~ 1", frame, groups="tool", re_formula="1",
                       vc_formula={"lot": "0 + C(lot)", "panel": "0 + C(panel)"})
    fit = model.fit(reml=True, method=["lbfgs", "powell"])
    reference = np.array([float(fit.cov_re.iloc[0, 0]), *fit.vcomp, fit.scale])
    np.testing.assert_allclose(ours.variances, reference, rtol=2e-3, atol=1e-4)


def test_residual_and_panel_components_match_anova_mean_squares() -> None:
    sm = pytest.importorskip("statsmodels.formula.api")
    pd = pytest.importorskip("pandas")
    anova_lm = pytest.importorskip("statsmodels.stats.anova").anova_lm
    rng = np.random.default_rng(7)
    panel = np.repeat(np.arange(30), 8)
    y = rng.normal(0, 2.0, 30)[panel] + rng.normal(0, 1.0, panel.size)
    ours = variance_components(y, [panel])
    # Outside check: statsmodels anova_lm one-way table; s_e^2 = MS_resid and
    # s_panel^2 = (MS_panel - MS_resid) / 8 (the one-way random-effects moment estimator).
    table = anova_lm(sm.ols("y ~ C(panel)", pd.DataFrame({"y": y, "panel": panel})).fit())
    ms = table["sum_sq"] / table["df"]
    np.testing.assert_allclose(ours.variances[1], ms["Residual"], rtol=1e-10)
    np.testing.assert_allclose(ours.variances[0], (ms["C(panel)"] - ms["Residual"]) / 8,
                               rtol=1e-10)


def test_unbalanced_data_recovers_known_components_on_average() -> None:
    # Seeded simulation: the moment estimators are unbiased, so the mean over repeats lands
    # near the true variances even with unequal group sizes.
    rng = np.random.default_rng(11)
    estimates = []
    for _ in range(200):
        sizes = rng.integers(2, 9, 40)
        lot = np.repeat(np.arange(40) // 4, sizes)
        panel = np.repeat(np.arange(40), sizes)
        y = (rng.normal(0, 1.0, 10)[lot] + rng.normal(0, 2.0, 40)[panel]
             + rng.normal(0, 1.5, panel.size))
        estimates.append(variance_components(y, [lot, panel]).variances)
    np.testing.assert_allclose(np.mean(estimates, axis=0), [1.0, 4.0, 2.25], rtol=0.15)


def test_bad_input_is_refused() -> None:
    with pytest.raises(OverlayInputError, match="non-finite"):
        variance_components(np.array([1.0, np.nan]), [np.array([0, 1])])
    with pytest.raises(OverlayInputError, match="shape"):
        variance_components(np.ones(3), [np.array([0, 1])])
