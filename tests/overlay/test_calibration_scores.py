"""The scores of the calibration benchmarks (benchmarks/calibration_scores.py).

Brier score and skill as in Wilks, *Statistical Methods in the Atmospheric Sciences*, ch. 8;
the panel rates and the lowest false alarm at a miss target checked by brute force over every
threshold.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

sys.path.insert(0, str(Path(__file__).resolve().parents[2] / "benchmarks"))

from calibration_scores import layer_score, lowest_false_alarm, panel_scores


def test_brier_and_skill_by_hand() -> None:
    p = np.array([0.1, 0.9, 0.5, 0.0])
    y = np.array([0, 1, 1, 0], dtype=bool)
    sc = layer_score(p, y, 3)
    brier = np.mean((p - y) ** 2)  # 0.0675
    assert sc.brier == pytest.approx(brier)
    assert sc.skill == pytest.approx(1.0 - brier / 0.25)  # base rate 0.5
    assert sc.ratio == pytest.approx(1.5 / 2)


def test_lowest_false_alarm_is_the_best_threshold_by_brute_force() -> None:
    rng = np.random.default_rng(2026)
    for _ in range(20):
        y = rng.random(300) < 0.15
        p = np.clip(rng.normal(0.3 * y[:, None] + 0.1, 0.2, (300, 12)), 0.0, 1.0)
        theta, fa = lowest_false_alarm(p, y, by=9, miss=0.05)
        best = np.inf
        for t in np.unique(p[:, :9]):
            ps = panel_scores(p >= t, y, by=9)
            if ps.miss.value <= 0.05:
                best = min(best, ps.false_alarm.value)
        assert fa == pytest.approx(best)
        assert panel_scores(p >= theta, y, by=9).miss.value <= 0.05
        # On the last layer alone: the same scan with only layer 9's P able to flag.
        theta, fa = lowest_false_alarm(p, y, by=9, miss=0.05, last_only=True)
        last = np.zeros_like(p, dtype=bool)
        best = np.inf
        for t in np.unique(p[:, 8]):
            last[:, 8] = p[:, 8] >= t
            ps = panel_scores(last, y, by=9)
            if ps.miss.value <= 0.05:
                best = min(best, ps.false_alarm.value)
        assert fa == pytest.approx(best)
