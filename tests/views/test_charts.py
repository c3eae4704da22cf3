"""The SVG charts: the elements a reader relies on, placed where the figures say."""

from __future__ import annotations

import xml.etree.ElementTree as ET
from datetime import UTC, datetime

import numpy as np
import pytest

from app.schemas.figures import LayersReached
from app.schemas.panels import PanelRead, SidesInt, StackLayerRead, StackRead
from app.views import charts

NS = {"s": "http://www.w3.org/2000/svg"}


def _layer(side: str, k: int, cumulative: float, position: tuple[float, float]
           ) -> StackLayerRead:
    return StackLayerRead(
        side=side,
        layer=k,
        measurement_id="m",
        exposure_tool="T",
        measured_at=datetime(2026, 1, 1, tzinfo=UTC),
        model="6_terms",
        note=None,
        tx_um=0,
        ty_um=0,
        sx_ppm=0,
        sy_ppm=0,
        rotation_urad=0,
        nonorthogonality_urad=0,
        kx_um_per_mm2=0,
        ky_um_per_mm2=0,
        sigma_x_um=1,
        sigma_y_um=1,
        l2l_worst_um=1,
        ftb_through_layer_um=cumulative,
        side_position_um=position,
    )


def _panel(worst: float, forecast: dict | None) -> PanelRead:
    return PanelRead(
        serial="P", product="X", lot="L", status="on_hold",
        layers_reached=LayersReached(A=3, B=2), missing_layers=SidesInt(A=[], B=[]),
        ftb_current_um=worst, ftb_current_at_mm=(0, 0), ftb_current_points=[], l2l_worst_um=1,
        risk="at_risk", risk_rule="forecast_at_risk", reasons=["r"], forecast=forecast,
        updated_at=datetime.now(UTC))


def test_stack_walk_has_one_point_per_layer_on_a_linear_axis_with_the_limit():
    cumulative = [4.0, 11.0, 19.5]
    stack = StackRead(serial="P", ftb_current_at_mm=(0, 0), layers=[
        *[_layer("A", k, cumulative[k - 1], (3.0 * k, 4.0 * k)) for k in (1, 2, 3)],
        *[_layer("B", k, cumulative[k - 1], (-1.0 * k, 0.0)) for k in (1, 2)]],
        residual_sigma_um=(1, 1), linear_worst_case_um=0, rss_um=0)
    panel = _panel(19.5, {"ftb_final_forecast_um": 48.0, "ftb_final_band_um": (35.0, 61.0),
                          "p_final_over_limit": 0.3,
                          "layers_to_come": {"A": [4, 5, 6], "B": [3, 4, 5, 6]}, "method": "m"})
    svg = ET.fromstring(str(charts.stack_walk_svg(stack, panel, ftb_limit_um=55.0,
                                                  layers_per_side=6)))
    points = svg.findall(".//s:circle[@class='ftb-point']", NS)
    assert len(points) == 3  # one per layer reached, layers 1..3
    cx = np.array([float(p.get("cx")) for p in points])
    cy = np.array([float(p.get("cy")) for p in points])
    # Layers equally spaced on x; values on a linear y axis through the limit line and zero.
    assert np.allclose(np.diff(cx), cx[1] - cx[0], atol=0.15)
    limit = svg.find(".//s:line[@class='limit-line']", NS)
    y_limit = float(limit.get("y1"))
    slope = (cy[2] - cy[0]) / (cumulative[2] - cumulative[0])
    assert cy[0] + slope * (55.0 - cumulative[0]) == pytest.approx(y_limit, abs=0.2)
    assert len(svg.findall(".//s:rect[@class='side-a-point']", NS)) == 3
    assert len(svg.findall(".//s:path[@class='side-b-point']", NS)) == 2
    # Side A's stack at layer 3 sits at |(9, 12)| = 15 um: on the same axis.
    a3 = svg.findall(".//s:rect[@class='side-a-point']", NS)[2]
    assert float(a3.get("y")) + 4 == pytest.approx(cy[0] + slope * (15.0 - cumulative[0]),
                                                   abs=0.2)
    assert svg.find(".//s:path[@class='forecast-fan']", NS) is not None
    texts = " ".join(t.text or "" for t in svg.iter(f"{{{NS['s']}}}text"))
    assert "(µm)" in texts and "Layer" in texts and "FTB limit 55 µm" in texts


def test_vector_map_draws_one_arrow_per_point_and_a_scale_arrow_to_the_same_scale():
    rng = np.random.default_rng(3)
    arrows = [charts.Arrow(x, y, *rng.normal(0, 10, 2)) for x in (-200, 0, 200)
              for y in (-200, 0, 200)]
    svg = ET.fromstring(str(charts.vector_map_svg(arrows, width_mm=510, height_mm=515,
                                                  title="t", ident="m")))
    lines = svg.findall(".//s:g[@class='arrows']/s:line", NS)
    assert len(lines) == 9
    lengths = [np.hypot(float(a.get("x2")) - float(a.get("x1")),
                        float(a.get("y2")) - float(a.get("y1"))) for a in lines]
    px_per_um = lengths[0] / np.hypot(arrows[0].dx_um, arrows[0].dy_um)
    np.testing.assert_allclose(lengths, [px_per_um * np.hypot(a.dx_um, a.dy_um)
                                         for a in arrows], atol=0.15)
    scale = svg.find(".//s:g[@class='scale-arrow']/s:line", NS)
    ref_um = float(next(t.text for t in svg.iter(f"{{{NS['s']}}}text")
                        if t.text and " µm vector" in t.text).split()[0])
    assert float(scale.get("x2")) - float(scale.get("x1")) == pytest.approx(ref_um * px_per_um,
                                                                            abs=0.15)
    # y up in the panel frame is up on the screen: a +dy arrow points to a smaller SVG y.
    up = ET.fromstring(str(charts.vector_map_svg([charts.Arrow(0, 0, 0, 5)], width_mm=510,
                                                 height_mm=515, title="t", ident="u")))
    line = up.find(".//s:g[@class='arrows']/s:line", NS)
    assert float(line.get("y2")) < float(line.get("y1"))


@pytest.mark.parametrize("span,step", [(100, 20), (7, 2), (0.9, 0.2), (260, 50)])
def test_nice_step(span, step):
    assert charts.nice_step(span) == pytest.approx(step)
