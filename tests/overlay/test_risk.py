"""Risk levels, deciding rules and the reasons given for them."""

from __future__ import annotations

import dataclasses
import re

import numpy as np
import pytest

from app.overlay.capture import InterfaceCapture
from app.overlay.errors import OverlayInputError
from app.overlay.forecast import Forecast, SideTrend
from app.overlay.probability import WorstPointExceedance
from app.overlay.risk import RISK_LEVELS, RULES, RiskThresholds, assess, severity

LIMITS = RiskThresholds(ftb_limit_um=60.0, l2l_limit_um=12.0)


def trend(
    drift: tuple[float, float],
    observed: int = 6,
    layers: int = 12,
    expected: tuple[float, float] = (1.0, 0.0),
    missing: tuple[int, ...] = (),
) -> SideTrend:
    observed_layers = tuple(k for k in range(1, observed + 1 + len(missing)) if k not in missing)
    remaining = tuple(k for k in range(1, layers + 1) if k not in observed_layers)
    return SideTrend(
        observed_layers=observed_layers,
        remaining_layers=remaining,
        per_layer_um=expected,
        observed_per_layer_um=drift,
    )


def forecast(
    p: float,
    final: float = 67.0,
    band: tuple[float, float] = (38.0, 96.0),
    trend_a: SideTrend | None = None,
    trend_b: SideTrend | None = None,
) -> Forecast:
    a = trend_a if trend_a is not None else trend((3.0, 0.0))
    b = trend_b if trend_b is not None else trend((-3.0, 0.0), expected=(-1.0, 0.0))
    exceedance = WorstPointExceedance(
        p_exceed=p,
        stderr=0.01,
        n_samples=4000,
        worst_mean_um=final,
        worst_band_um=band,
        seed=0,
    )
    return Forecast(
        trend_a=a,
        trend_b=b,
        current_terms=np.zeros(8),
        final_mean_terms=np.zeros(8),
        final_cov_terms=np.eye(8),
        exceedance=exceedance,
        final_worst_um=final,
        band_um=band,
        p_exceed=p,
        p_stderr=0.01,
        tool=None,
        method="test",
        complete=not a.remaining_layers and not b.remaining_layers,
        trending=np.zeros(8),
    )


def run(
    ftb: float = 10.0,
    fc: Forecast | None = None,
    l2l_a: dict[int, float] | None = None,
    l2l_b: dict[int, float] | None = None,
    thresholds: RiskThresholds = LIMITS,
    interfaces: list[InterfaceCapture] | None = None,
):
    return assess(
        ftb_worst_um=ftb,
        ftb_worst_at_mm=(229.5, -231.8),
        l2l_worst_a_um=l2l_a if l2l_a is not None else {1: 4.0, 2: 5.0},
        l2l_worst_b_um=l2l_b if l2l_b is not None else {1: 3.0},
        forecast=fc,
        thresholds=thresholds,
        interfaces=interfaces,
    )


def test_levels_are_ordered_by_severity() -> None:
    assert [severity(level) for level in RISK_LEVELS] == [0, 1, 2, 3]
    assert {level for _, level in RULES} == set(RISK_LEVELS)
    with pytest.raises(OverlayInputError):
        severity("hold")


# reference for the rule table: docs/conventions.md, forecast and risk, and the product's limits;
# the 70 % watch fraction and the 0.05 watch probability are common practice, 0.50 at risk is
# "more likely than not" (RiskThresholds says why); all are product settings.
@pytest.mark.parametrize(
    ("p", "level", "rule"),
    [
        (0.0, "clear", "clear"),
        (0.049, "clear", "clear"),
        (0.05, "watch", "forecast_watch"),
        (0.49, "watch", "forecast_watch"),
        (0.50, "at_risk", "forecast_at_risk"),
        (0.9, "at_risk", "forecast_at_risk"),
    ],
)
def test_probability_rules(p: float, level: str, rule: str) -> None:
    result = run(fc=forecast(p))
    assert (result.level, result.rule) == (level, rule)
    assert result.reasons
    said = "less than a 1 % chance" if p < 0.01 else f"a {p:.0%} chance".replace("%", " %")
    assert f"{said} of ending over" in " ".join(result.reasons)


@pytest.mark.parametrize(
    ("ftb", "level", "rule"),
    [
        (41.9, "clear", "clear"),
        (42.0, "watch", "current_ftb_near_limit"),  # 70 % of 60 um
        (60.0, "watch", "current_ftb_near_limit"),  # at the limit is not over it
        (60.1, "over_limit", "current_ftb_over_limit"),
    ],
)
def test_current_ftb_rules(ftb: float, level: str, rule: str) -> None:
    # reference: common practice (watch from 70 % of a limit); docs/conventions.md (FTB limit)
    result = run(ftb=ftb, fc=forecast(0.01))
    assert (result.level, result.rule) == (level, rule)
    text = " ".join(result.reasons)
    assert f"{ftb:.1f} um" in text
    assert "60 um" in text
    if rule == "current_ftb_near_limit":
        assert "70 %" in text
        assert "(229.5, -231.8) mm" in text


def test_watch_fraction_is_a_setting() -> None:
    loose = RiskThresholds(ftb_limit_um=60.0, l2l_limit_um=12.0, watch_fraction=0.8)
    assert run(ftb=45.0, thresholds=loose).level == "clear"
    assert run(ftb=48.0, thresholds=loose).rule == "current_ftb_near_limit"


def test_l2l_over_limit_on_either_side() -> None:
    # reference: docs/conventions.md (L2L limit per layer)
    result = run(l2l_a={1: 4.0, 4: 13.2}, l2l_b={2: 12.5})
    assert (result.level, result.rule) == ("over_limit", "l2l_over_limit")
    assert any("Side A layer 4" in r and "13.2 um" in r and "12 um" in r for r in result.reasons)
    assert any("Side B layer 2" in r and "12.5 um" in r for r in result.reasons)
    assert run(l2l_a={1: 12.0}).level == "clear"  # at the limit is within it


def face(
    worst: float,
    *,
    se: float = 0.0,
    margin: float | None = None,
    p_miss: float | None = None,
    side: str = "B",
    layer: int = 5,
    overlap: float = 1.0,
    ratio: float = 1.0,
) -> InterfaceCapture:
    return InterfaceCapture(
        side=side, layer=layer, worst_um=worst, worst_at_mm=(229.5, 231.8), model_se_um=se,
        margin_um=margin, p_miss=p_miss,
        p_miss_at_mm=None if p_miss is None else (229.5, 231.8),
        overhang_um=None if margin is None else worst - margin,
        overlap_fraction=None if margin is None else overlap,
        resistance_ratio=None if margin is None else ratio,
    )


def test_l2l_limit_allows_for_the_fits_standard_error() -> None:
    # Over the 12 um limit only by more than 2 of the fit's standard errors (risk.SE_FACTOR).
    assert run(interfaces=[face(13.0, se=0.6)]).level == "clear"  # 13 - 1.2 < 12
    result = run(interfaces=[face(13.0, se=0.4)])  # 13 - 0.8 > 12
    assert (result.level, result.rule) == ("over_limit", "l2l_over_limit")
    assert "Side B layer 5 sits 13.0 um off the layer beneath at (229.5, 231.8) mm: 1.0 um over" \
        in result.reasons[0]
    assert "the fit is good to 0.4 um there" in result.reasons[0]


def test_via_off_pad_uses_the_capture_margin() -> None:
    # With via settings the capture margin judges L2L, not the L2L limit: 14 um is over the
    # 12 um limit but inside a 15 um margin.
    inside = run(interfaces=[face(14.0, margin=15.0, p_miss=0.01)])
    assert inside.level == "clear"
    result = run(interfaces=[face(15.7, se=0.3, margin=12.5, p_miss=0.8, overlap=0.9,
                                  ratio=1.11)])
    assert (result.level, result.rule) == ("over_limit", "via_off_pad")
    reason = result.reasons[0]
    assert reason.startswith("Via on layer 5 side B can miss its pad by 3.2 um at (229.5, 231.8)")
    assert "capture margin of 12.5 um" in reason
    assert "90 % of the via bottom" in reason and "about 1.1 x the usual" in reason
    # Past the margin by less than 2 standard errors: not over, but the miss probability speaks.
    near = run(interfaces=[face(13.0, se=0.4, margin=12.5, p_miss=0.6)])
    assert (near.level, near.rule) == ("at_risk", "via_miss_at_risk")
    off = run(interfaces=[face(60.0, margin=12.5, p_miss=1.0, overlap=0.0,
                               ratio=float("inf"))])
    assert "off its pad entirely" in off.reasons[0]


@pytest.mark.parametrize(
    ("p_miss", "level", "rule"),
    [(0.049, "clear", "clear"), (0.05, "watch", "via_miss_watch"),
     (0.49, "watch", "via_miss_watch"), (0.5, "at_risk", "via_miss_at_risk")],
)
def test_via_miss_probability_levels(p_miss: float, level: str, rule: str) -> None:
    result = run(interfaces=[face(10.0, margin=12.5, p_miss=p_miss)])
    assert (result.level, result.rule) == (level, rule)
    if rule != "clear":
        chance = f"a {p_miss:.0%} chance".replace("%", " %")
        assert f"{chance} of missing part of their pad at (229.5, 231.8) mm" in result.reasons[0]
        assert "capture margin of 12.5 um" in result.reasons[0]


def test_reasons_carry_the_figures() -> None:
    result = run(ftb=36.0, fc=forecast(0.64))
    assert (result.level, result.rule) == ("at_risk", "forecast_at_risk")
    side_a = next(r for r in result.reasons if r.startswith("Side A"))
    side_b = next(r for r in result.reasons if r.startswith("Side B"))
    for sentence, direction in ((side_a, "+x"), (side_b, "-x")):
        assert "3.0 um a layer" in sentence
        assert f"toward {direction}" in sentence
        assert "6 layers" in sentence
        assert "expected to add 1.0 um" in sentence  # what each layer to come adds
    projection = result.reasons[-1]
    assert "With 6 layers to come on each side" in projection
    assert "expected near 67 um" in projection
    assert "95 % band 38-96 um" in projection
    assert "the 60 um limit" in projection
    assert "a 64 % chance of ending over it" in projection


def test_direction_off_axis_and_no_drift() -> None:
    fc = forecast(0.3, trend_a=trend((2.0, 2.0)), trend_b=trend((0.0, 0.0), expected=(0.0, 0.0)))
    text = " ".join(run(fc=fc).reasons)
    assert "2.8 um a layer toward 45 deg from +x" in text
    assert "Side B has not moved one way" in text
    fc = forecast(0.3, trend_a=trend((0.1, -2.5)))
    assert "toward -y" in " ".join(run(fc=fc).reasons)


def test_missing_and_uneven_remaining_layers_are_named() -> None:
    fc = forecast(0.3, trend_a=trend((3.0, 0.0), observed=5, missing=(3,)), trend_b=trend((0, 0)))
    projection = run(fc=fc).reasons[-1]
    assert "7 layers to come on side A and 6 on side B" in projection
    assert "side A layer 3" in projection


def test_every_cause_is_listed() -> None:
    result = run(ftb=45.0, fc=forecast(0.64), l2l_b={5: 14.0})
    assert (result.level, result.rule) == ("over_limit", "l2l_over_limit")
    text = " ".join(result.reasons)
    assert "Side B layer 5" in text  # the L2L cause
    assert "Side A has moved 3.0 um a layer toward +x" in text  # the drift cause
    assert "a 64 % chance of ending over it" in text  # the forecast
    assert "75 % of the 60 um limit" in text  # the near-limit cause


def test_no_forecast_and_complete_stack() -> None:
    result = run(ftb=12.0)
    assert result.level == "clear"
    assert "no forecast" in result.reasons[0]
    done = trend((3.0, 0.0), observed=12)
    fc = forecast(1.0, final=72.0, band=(72.0, 72.0), trend_a=done, trend_b=done)
    result = run(ftb=72.0, fc=fc)
    assert (result.level, result.rule) == ("over_limit", "current_ftb_over_limit")
    assert any("Every layer is on" in r and "72.0 um" in r for r in result.reasons)


@pytest.mark.parametrize(
    "kwargs",
    [
        {"ftb_limit_um": 0.0, "l2l_limit_um": 12.0},
        {"ftb_limit_um": 60.0, "l2l_limit_um": float("nan")},
        {"ftb_limit_um": 60.0, "l2l_limit_um": 12.0, "p_watch": 0.3, "p_at_risk": 0.2},
        {"ftb_limit_um": 60.0, "l2l_limit_um": 12.0, "watch_fraction": 1.5},
    ],
)
def test_bad_thresholds_are_refused(kwargs: dict[str, float]) -> None:
    with pytest.raises(OverlayInputError):
        RiskThresholds(**kwargs)


def test_bad_figures_are_refused() -> None:
    with pytest.raises(OverlayInputError):
        run(ftb=float("nan"))
    with pytest.raises(OverlayInputError):
        run(l2l_a={1: float("inf")})


@pytest.mark.parametrize(
    ("observed_a", "observed_b", "phrase"),
    [
        (11, 11, "1 layer to come on each side"),
        (10, 10, "2 layers to come on each side"),
        (11, 9, "1 layer to come on side A and 3 on side B"),
        (9, 11, "3 layers to come on side A and 1 on side B"),
    ],
)
def test_remaining_layers_phrase_agrees_in_number(
    observed_a: int, observed_b: int, phrase: str
) -> None:
    fc = forecast(0.3, trend_a=trend((3.0, 0.0), observed=observed_a),
                  trend_b=trend((-3.0, 0.0), observed=observed_b))
    text = " ".join(run(fc=fc).reasons)
    assert phrase in text
    assert re.search(r"\b1 layers", text) is None


@pytest.mark.parametrize(
    ("p", "previous", "level"),
    [
        # Entering needs the enter threshold...
        (0.45, None, "watch"),
        (0.45, "clear", "watch"),
        (0.50, "watch", "at_risk"),
        # ... leaving needs the lower leave threshold (defaults 0.25 and 0.02).
        (0.45, "at_risk", "at_risk"),
        (0.25, "at_risk", "at_risk"),
        (0.249, "at_risk", "watch"),
        (0.03, "watch", "watch"),
        (0.03, "clear", "clear"),
        (0.019, "watch", "clear"),
        (0.019, "at_risk", "clear"),
    ],
)
def test_hysteresis_enter_and_leave(p, previous, level):
    out = assess(
        ftb_worst_um=10.0, ftb_worst_at_mm=None, l2l_worst_a_um={}, l2l_worst_b_um={},
        forecast=forecast(p), thresholds=LIMITS, previous_level=previous,
    )
    assert out.level == level
    if previous == "at_risk" and level == "at_risk" and p < 0.50:
        assert any("so it stays at risk (it leaves below 25 %" in r for r in out.reasons)


def test_hysteresis_stops_flapping_about_a_threshold():
    # P wandering 0.44..0.56 about the 0.50 at-risk threshold: without hysteresis the panel goes
    # in and out five times; with it, in once and it stays.
    ps = [0.44, 0.52, 0.46, 0.54, 0.44, 0.56, 0.46, 0.52, 0.48, 0.54, 0.44]
    levels, previous = [], None
    for p in ps:
        previous = assess(
            ftb_worst_um=10.0, ftb_worst_at_mm=None, l2l_worst_a_um={}, l2l_worst_b_um={},
            forecast=forecast(p), thresholds=LIMITS, previous_level=previous,
        ).level
        levels.append(previous)
    assert levels[0] == "watch" and set(levels[1:]) == {"at_risk"}


def test_leave_thresholds_are_checked():
    with pytest.raises(OverlayInputError, match="p_at_risk_leave"):
        RiskThresholds(ftb_limit_um=60.0, l2l_limit_um=12.0, p_at_risk_leave=0.6)
    with pytest.raises(OverlayInputError, match="p_watch_leave"):
        RiskThresholds(ftb_limit_um=60.0, l2l_limit_um=12.0, p_watch_leave=0.0)
    assert LIMITS.decision_points() == (0.02, 0.05, 0.25, 0.50)


def test_a_growing_scale_is_named_with_its_figures() -> None:
    # The forecast holds the scale as trending (posterior 0.86): the reasons name it, with the
    # FTB scale now and expected (Sx, Sy in um/mm; 1e-3 um/mm is 1 ppm).
    fc = forecast(0.64)
    current = np.zeros(8)
    current[2:4] = (0.0031, 0.0029)
    final = np.zeros(8)
    final[2:4] = (0.0079, 0.0081)
    weights = np.zeros(8)
    weights[2] = 0.86
    grown = dataclasses.replace(fc, current_terms=current, final_mean_terms=final,
                                trending=weights)
    result = run(fc=grown)
    said = [r for r in result.reasons if "growing core" in r]
    assert said == ["Its scale changes layer by layer, the way a growing core does (86 % likely "
                    "from its layers so far): the FTB scale is +3.0 ppm now and expected near "
                    "+8.0 ppm when every layer is on."]
    # It stands before the sentence on the final FTB, which stays last.
    assert result.reasons[-1].startswith("With ")
    # An estimate is never "100 %".
    weights[2] = 0.996
    sure = dataclasses.replace(grown, trending=weights)
    assert any("(more than 99 % likely from its layers so far)" in r
               for r in run(fc=sure).reasons)
    # Below an even chance of trending, no such sentence.
    weights[2] = 0.49
    quiet = dataclasses.replace(grown, trending=weights)
    assert not [r for r in run(fc=quiet).reasons if "growing core" in r]
