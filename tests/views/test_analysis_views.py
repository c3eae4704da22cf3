"""The analysis pages' drawings: EWMA charts, bars, the lot histogram, fingerprint arrows and
the terms table. Each checks that the elements a reader relies on are there, and where."""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET
from datetime import UTC, datetime, timedelta

import numpy as np
import pytest

from app.schemas.analysis import (
    DriftAlarm,
    DriftChart,
    DriftPoint,
    FingerprintRow,
    TermFigure,
)
from app.views.bars import Bar, bar_chart_svg, histogram_bins, histogram_svg
from app.views.drift_charts import chart_ident, ewma_chart_svg, is_alarm
from app.views.tool_views import fingerprint_arrows, lots_since_change, term_rows

NS = {"s": "http://www.w3.org/2000/svg"}
T0 = datetime(2026, 11, 2, 6, 0, tzinfo=UTC)
NAMES = ("Tx", "Ty", "Sx", "Sy", "Ox", "Oy", "Kx", "Ky")


def _classed(root: ET.Element, css: str) -> list[ET.Element]:
    return [e for e in root.iter() if css in (e.get("class") or "").split()]


def _chart(term: str = "Tx", values: tuple[float, ...] = (0.0, 0.1, 0.4, 1.2, 2.0),
           rules_at: int | None = None) -> DriftChart:
    points = [DriftPoint(lot=f"LOT{i // 2}", layer=1 + i % 3, panels=4,
                         at=T0 + timedelta(days=i), mean_facing_side=v * 1.5, ewma=v,
                         lower=-1.0, upper=1.0, rules=["8 in a row on one side"]
                         if i == rules_at else [])
              for i, v in enumerate(values)]
    return DriftChart(exposure_tool="EXP-9", side="B", term=term, centre=0.0, sigma_between=0.1,
                      sigma_within=0.2, points=points)


def test_ewma_chart_draws_every_point_both_limits_and_marks_alarms_by_shape_and_text():
    chart = _chart(rules_at=1)
    root = ET.fromstring(str(ewma_chart_svg(chart)))
    points = _classed(root, "ewma-point")
    assert len(points) == 5
    assert len(_classed(root, "subgroup-mean")) == 5
    assert len(_classed(root, "limit-line")) == 2 and len(_classed(root, "centre-line")) == 1
    # Alarms: the run rule at point 1, and the EWMA beyond the upper limit at points 3 and 4.
    assert [is_alarm(p) for p in chart.points] == [False, True, False, True, True]
    marks = _classed(root, "alarm-mark")
    assert len(marks) == 3 and all(m.tag.endswith("path") for m in marks)  # triangles
    assert all(m.tag.endswith("circle") for m in points if m not in marks)
    # "alarm" written at the start of each run of alarms: points 1 and 3.
    assert [t.text for t in _classed(root, "alarm-text")] == ["alarm", "alarm"]
    assert root.get("id") == chart_ident("EXP-9", "B", "Tx") == "ewma-exp-9-b-tx"


def test_ewma_chart_places_points_on_a_linear_scale_in_the_reported_unit():
    chart = _chart(term="Sx", values=(0.0, 0.001, 0.002))  # raw µm/mm
    svg = str(ewma_chart_svg(chart))
    root = ET.fromstring(svg)
    circles = [c for c in _classed(root, "ewma-point") if c.tag.endswith("circle")]
    xs = [float(c.get("cx")) for c in circles]
    ys = [float(c.get("cy")) for c in circles]
    # Equal steps in time and value give equal steps on the page.
    assert xs[1] - xs[0] == pytest.approx(xs[2] - xs[1], abs=0.15)
    assert ys[0] - ys[1] == pytest.approx(ys[1] - ys[2], abs=0.15) and ys[0] > ys[1]
    assert "Sx, scale x (ppm)" in svg  # 1 µm/mm = 1000 ppm (docs/conventions.md)
    assert "EWMA 2 ppm" in svg
    assert "Measured (UTC date" in svg


def test_a_chart_without_points_says_so():
    chart = DriftChart(exposure_tool="T", side="A", term="Ty", centre=0, sigma_between=0,
                       sigma_within=0, points=[])
    assert "No subgroup" in str(ewma_chart_svg(chart))


def test_bars_one_per_entry_about_zero_with_lengths_in_proportion():
    bars = [Bar("L1 A", 50.0), Bar("L1 B", 75.0), Bar("EXP-1", -25.0)]
    root = ET.fromstring(str(bar_chart_svg(bars, title="t", axis_label="Share (%)",
                                           ident="b")))
    rects = _classed(root, "bar")
    assert len(rects) == 3
    zero = float(_classed(root, "zero-line")[0].get("x1"))
    widths = [float(r.get("width")) for r in rects]
    assert widths[0] * 1.5 == pytest.approx(widths[1], abs=0.2)
    assert widths[0] / 2 == pytest.approx(widths[2], abs=0.2)
    assert float(rects[0].get("x")) == pytest.approx(zero, abs=0.1)
    assert float(rects[2].get("x")) + widths[2] == pytest.approx(zero, abs=0.1)  # left of 0
    assert rects[2].get("fill") == "url(#b-hatch)" and rects[0].get("fill") != "url(#b-hatch)"
    assert any(t.text == "Share (%)" for t in root.iter(f"{{{NS['s']}}}text"))


def test_histogram_counts_agree_with_numpy_and_the_limit_sits_at_its_value():
    rng = np.random.default_rng(11)
    values = list(rng.gamma(4.0, 6.0, 200))
    bins = histogram_bins(values, limit=55.0)
    edges = np.array([b.start for b in bins] + [bins[-1].end])
    # Outside check: numpy.histogram over the same edges (its last bin is closed, as ours
    # takes the top value into the last bin).
    expected, _ = np.histogram(values, bins=edges)
    assert [b.count for b in bins] == list(expected)
    assert edges[-1] >= max(max(values), 55.0)
    svg = str(histogram_svg(values, limit=55.0, title="t", axis_label="FTB now (µm)",
                            ident="h"))
    root = ET.fromstring(svg)
    rects = _classed(root, "bin")
    assert len(rects) == len(bins)
    assert sum(int(r.get("data-count")) for r in rects) == 200
    line = _classed(root, "limit-line")[0]
    left, width = 56, 540  # the plot area
    assert float(line.get("x1")) == pytest.approx(left + width * 55.0 / edges[-1], abs=0.1)
    assert f"{sum(v > 55.0 for v in values)} above the limit" in svg


def _figures(values: list[float], half: float | None = 0.1) -> list[TermFigure]:
    return [TermFigure(term=n, mean=v, half_width=half) for n, v in zip(NAMES, values,
                                                                         strict=True)]


def test_fingerprint_arrows_give_back_the_terms_by_least_squares():
    terms = [1.5, -0.8, 0.004, -0.002, 0.003, 0.001, 2e-6, -1e-6]
    xs, ys = np.meshgrid(np.linspace(-230, 230, 5), np.linspace(-230, 230, 5))
    points = list(zip(xs.ravel(), ys.ravel(), strict=True))
    arrows = fingerprint_arrows(_figures(terms), points)
    assert len(arrows) == 25 and (arrows[3].x_mm, arrows[3].y_mm) == points[3]
    # Outside check: numpy.linalg.lstsq on the model's design matrix (DOMAIN.md:
    # dx = Tx + Sx x - Ox y + Kx x y, dy = Ty + Sy y + Oy x + Ky x y) recovers the terms.
    x, y = xs.ravel(), ys.ravel()
    zero, one = np.zeros_like(x), np.ones_like(x)
    design = np.block([[np.stack([one, zero, x, zero, -y, zero, x * y, zero], 1)],
                       [np.stack([zero, one, zero, y, zero, x, zero, x * y], 1)]])
    observed = np.concatenate([[a.dx_um for a in arrows], [a.dy_um for a in arrows]])
    fitted, *_ = np.linalg.lstsq(design, observed, rcond=None)
    np.testing.assert_allclose(fitted, terms, rtol=1e-9, atol=1e-12)


def test_terms_table_in_reported_units_and_without_unfitted_trapezoid_terms():
    row = FingerprintRow(exposure_tool="T", side="A", layer=None, count=10, rest_count=20,
                         terms_facing_side=_figures([1.0, 0, 0.002, 0, 0, 0, 0, 0]),
                         rest_facing_side=_figures([0.5, 0, 0.001, 0, 0, 0, 0, 0]),
                         difference_facing_side=_figures([0.5, 0, 0.001, 0, 0, 0, 0, 0],
                                                        half=0.3))
    six = term_rows(row, model_terms=6)
    assert [r.term for r in six] == list(NAMES[:6])
    assert six[2].unit == "ppm" and six[2].tool == (pytest.approx(2.0), pytest.approx(100.0))
    assert six[0].stands_out and not six[1].stands_out  # |0.5| > 0.3; |0| < 0.3
    assert six[2].stands_out is False  # 1 ppm against a 300 ppm half-width
    assert [r.unit for r in term_rows(row)][6:] == ["µm/m²", "µm/m²"]


def test_lots_since_change_are_the_chart_lots_from_the_change_start_in_time_order():
    chart = _chart(values=(0, 0, 0, 0, 0, 0))  # lots LOT0, LOT0, LOT1, LOT1, LOT2, LOT2
    alarm = DriftAlarm(exposure_tool="EXP-9", side="B", term="Tx", size_facing_side=1, strength=2,
                       first_signal=T0 + timedelta(days=4), change_start=T0 + timedelta(
                           days=1, hours=1), change_kind="step", change_rate=1, rules=[])
    assert lots_since_change(alarm, [chart]) == ["LOT1", "LOT2"]
    other = alarm.model_copy(update={"term": "Ty"})
    assert lots_since_change(other, [chart]) == []


def test_chart_ident_is_a_safe_fragment():
    assert re.fullmatch(r"[a-z0-9-]+", chart_ident("EXP 2/α", "A", "Ox"))
