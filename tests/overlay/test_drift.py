"""EWMA, run rules and change start, checked against the NIST/SEMATECH e-Handbook."""

from __future__ import annotations

import numpy as np
import pytest

from app.overlay.drift import (
    baseline,
    change_start,
    common_change_start,
    ewma_chart,
    run_rules,
    subgroup_sigma,
)
from app.overlay.errors import OverlayInputError

# NIST/SEMATECH e-Handbook of Statistical Methods, 6.3.2.4, worked example: 20 points, target
# 50, s = 2.0539 (from historical data), lambda = 0.3, k = 3. Data and limits from memory.
NIST_DATA = np.array([52.0, 47.0, 53.0, 49.3, 50.1, 47.0, 51.0, 50.1, 51.2, 50.5, 49.6, 47.6,
                      49.9, 51.3, 47.8, 51.2, 52.6, 52.4, 53.6, 52.1])


def test_ewma_reproduces_the_handbook_example() -> None:
    chart = ewma_chart(NIST_DATA, target=50.0, sigma=2.0539, lam=0.3, k=3.0)
    # Handbook: UCL = 52.5884, LCL = 47.4115 (from memory; the printed figures round
    # sqrt(0.3 / 1.7) = 0.4201, hence the tolerance).
    np.testing.assert_allclose(chart.upper, 52.5884, atol=2e-4)
    np.testing.assert_allclose(chart.lower, 47.4115, atol=2e-4)
    # Handbook: the first EWMA is 50.60 and the last ones 50.73, 51.23, 51.94, 51.99 (from
    # memory), and no point is beyond the limits: the process is in control.
    np.testing.assert_allclose(chart.ewma[0], 50.60, atol=5e-3)
    np.testing.assert_allclose(chart.ewma[-4:], [50.73, 51.23, 51.94, 51.99], atol=5e-3)
    assert chart.first_signal is None
    # The recursion itself, written out: z_i = 0.3 x_i + 0.7 z_{i-1}, z_0 = 50.
    z, expected = 50.0, []
    for value in NIST_DATA:
        z = 0.3 * value + 0.7 * z
        expected.append(z)
    np.testing.assert_allclose(chart.ewma, expected, rtol=1e-12)


def test_exact_limits_start_narrow_and_reach_the_steady_state() -> None:
    chart = ewma_chart(NIST_DATA, target=50.0, sigma=2.0539, lam=0.3, exact_limits=True)
    # Handbook 6.3.2.4: the factor [1 - (1 - lambda)^(2i)]; at i = 1 the variance of z_1 is
    # lambda^2 s^2, so the half-width is k * lambda * s.
    np.testing.assert_allclose(chart.upper[0] - 50.0, 3 * 0.3 * 2.0539, rtol=1e-12)
    np.testing.assert_allclose(chart.upper[-1], 52.5884, atol=2e-4)


def test_ewma_signals_a_shift_and_refuses_bad_settings() -> None:
    rng = np.random.default_rng(3)
    x = np.concatenate([rng.normal(0, 1, 30), rng.normal(1.5, 1, 30)])
    chart = ewma_chart(x, target=0.0, sigma=1.0)
    assert chart.first_signal is not None and chart.first_signal >= 30
    with pytest.raises(OverlayInputError, match="lambda"):
        ewma_chart(x, target=0.0, sigma=1.0, lam=0.0)
    with pytest.raises(OverlayInputError, match="sigma"):
        ewma_chart(x, target=0.0, sigma=0.0)


@pytest.mark.parametrize(("points", "index", "rule"), [
    ([0, 0.5, 3.2], 2, "1 beyond 3 sigma"),
    ([0, -2.1, 0.3, -2.5], 3, "2 of 3 beyond 2 sigma"),
    ([1.2, 1.1, 0.2, 1.5, 1.3], 4, "4 of 5 beyond 1 sigma"),
    ([0.1] * 8, 7, "8 in a row on one side"),
])
def test_western_electric_rules(points: list[float], index: int, rule: str) -> None:
    # The four rules as the NIST/SEMATECH e-Handbook 6.3.2 lists them.
    fired = run_rules(np.array(points, dtype=float))
    assert rule in fired[index]
    assert all(rule not in f for f in fired[:index])


def test_run_rules_need_one_side() -> None:
    fired = run_rules(np.array([2.5, -2.5, 0.0]))
    assert fired == [[], [], []]
    assert run_rules(np.array([0.1] * 7 + [-0.1])) == [[]] * 8


def test_baseline_one_way_moments() -> None:
    # Two subgroups of 3: means 1 and 3, within SS 4 (4 df): MS_w = 1, MS_b = 3 * 2 = 6,
    # n0 = 3, between^2 = (6 - 1) / 3 (one-way random-effects ANOVA, worked by hand).
    base = baseline(np.array([1.0, 3.0]), np.array([3, 3]), 4.0)
    assert base.target == pytest.approx(2.0)
    assert base.within == pytest.approx(1.0)
    assert base.between == pytest.approx(np.sqrt(5.0 / 3.0))
    np.testing.assert_allclose(subgroup_sigma(base, np.array([3])), [np.sqrt(5 / 3 + 1 / 3)])


def test_change_start_finds_a_step_and_a_ramp() -> None:
    rng = np.random.default_rng(5)
    t = np.arange(60, dtype=float)
    sig = np.full(60, 0.5)
    step = np.where(t >= 37, 2.0, 0.0) + rng.normal(0, 0.5, 60)
    found = change_start(t, step, sig, level=0.0, earliest=-30.0, latest=59.0)
    assert found.kind == "step" and abs(found.start - 37) <= 1.5
    assert found.size == pytest.approx(2.0, abs=0.3)
    # A ramp that began before the first point (at t = -10) is dated by extrapolation.
    ramp = 0.1 * (t + 10) + rng.normal(0, 0.5, 60)
    found = change_start(t, ramp, sig, level=0.0, earliest=-40.0, latest=59.0)
    assert found.kind == "ramp" and abs(found.start + 10) <= 4
    assert found.size == pytest.approx(0.1, abs=0.02)


def test_common_change_start_pools_series_with_one_start() -> None:
    # Seeded: three series share a ramp that began at t = 5 with different slopes; alone each is
    # noisy, pooled the start is closer to the truth than any single estimate's worst.
    rng = np.random.default_rng(9)
    t = np.arange(10.0, 40.0)
    sig = np.full(t.size, 0.6)
    series = [(t, b * (t - 5.0) + rng.normal(0, 0.6, t.size), sig, 0.0)
              for b in (0.05, 0.08, 0.1)]
    pooled = common_change_start(series, earliest=-20.0, latest=39.0)
    assert {c.kind for c in pooled} == {"ramp"}
    assert len({c.start for c in pooled}) == 1
    assert abs(pooled[0].start - 5.0) <= 3.0
    singles = [change_start(*s[:3], level=0.0, earliest=-20.0, latest=39.0) for s in series]
    assert abs(pooled[0].start - 5.0) <= max(abs(c.start - 5.0) for c in singles)
    with pytest.raises(OverlayInputError, match="ascending"):
        change_start(t[::-1], t, sig, level=0.0, earliest=0.0, latest=1.0)
