"""Risk level of a panel from its current overlay and the forecast of its final FTB.

Rules, most severe first (``RULES``); the level is the most severe rule that fires, ``rule``
names the first of those, and ``reasons`` holds one or more sentences for *every* rule that
fires, so that an engineer sees all causes (a side's drift and an L2L over limit, say):

=======================  ==========  =====================================================
rule                     level       fires when
=======================  ==========  =====================================================
ftb_over_limit           over_limit  current worst FTB > FTB limit
l2l_over_limit           over_limit  any layer's worst L2L > L2L limit (either side)
resistance_over_limit    over_limit  connection resistance > its limit (when both given)
p_exceed_at_risk         at_risk     forecast P(final FTB > limit) >= p_at_risk, or the panel
                                     was at_risk (or over) before and P >= p_at_risk_leave
p_exceed_watch           watch       forecast P(final FTB > limit) >= p_watch, or the panel
                                     was watched (or worse) before and P >= p_watch_leave
ftb_near_limit           watch       current worst FTB >= watch_fraction * FTB limit
clear                    clear       none of the above
=======================  ==========  =====================================================

Hysteresis: a level is entered at its threshold and left only below a lower leave threshold
(both product settings), with the previous level read from the panel's stored state. A P that
wanders about one threshold (Monte Carlo noise, or a forecast that changes little from layer to
layer) then does not take the panel in and out of the hold list. The forecast's Monte Carlo
grows near every threshold in ``RiskThresholds.decision_points`` until the side of the threshold
is decided at the stated confidence.

Directions are in the panel frame (x right, y up, looking at side A): "+x", "-y", or an angle
counter-clockwise from +x when the drift is more than 10 degrees off an axis. A side's drift is
the mean translation of its observed layers (``SideTrend.observed_per_layer_um``).

The level supports the fab's hold and disposition procedures; it decides nothing by itself.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Final

from app.overlay.errors import OverlayInputError
from app.overlay.forecast import Forecast, SideTrend
from app.overlay.model import FloatArray

RISK_LEVELS: Final = ("clear", "watch", "at_risk", "over_limit")
#: (rule, level), most severe first; the order in which reasons are listed.
RULES: Final = (
    ("ftb_over_limit", "over_limit"),
    ("l2l_over_limit", "over_limit"),
    ("resistance_over_limit", "over_limit"),
    ("p_exceed_at_risk", "at_risk"),
    ("p_exceed_watch", "watch"),
    ("ftb_near_limit", "watch"),
    ("clear", "clear"),
)
# A drift within this many degrees of an axis is reported as that axis.
_AXIS_SNAP_DEG: Final = 10.0
# Below this a side's mean translation per layer is reported as no net drift.
_NO_DRIFT_UM: Final = 0.05


def severity(level: str) -> int:
    """Rank of a level in ``RISK_LEVELS`` (0 = clear ... 3 = over_limit)."""
    try:
        return RISK_LEVELS.index(level)
    except ValueError:
        raise OverlayInputError(f"unknown risk level {level!r}; one of {RISK_LEVELS}") from None


def _finite_positive(name: str, value: float) -> None:
    if not (math.isfinite(value) and value > 0.0):
        raise OverlayInputError(f"{name} must be positive and finite, got {value!r}")


@dataclass(frozen=True)
class RiskThresholds:
    """Limits and thresholds of a product.

    Attributes
    ----------
    ftb_limit_um, l2l_limit_um : float
        FTB and L2L limits (vector length), um.
    p_watch, p_at_risk : float
        P(exceed) from which a panel is watched or at risk; 0 < p_watch <= p_at_risk <= 1.
    watch_fraction : float
        Current FTB from this share of the limit is watched (0.70, common practice).
    resistance_limit_ohm : float or None
        Limit of the representative connection's resistance, when the product has one.
    p_watch_leave, p_at_risk_leave : float
        A watched (at-risk) panel leaves that level only when P falls below these;
        0 < p_watch_leave <= p_watch and 0 < p_at_risk_leave <= p_at_risk.
    """

    ftb_limit_um: float
    l2l_limit_um: float
    p_watch: float = 0.05
    p_at_risk: float = 0.20
    watch_fraction: float = 0.70
    resistance_limit_ohm: float | None = None
    p_watch_leave: float = 0.02
    p_at_risk_leave: float = 0.10

    def decision_points(self) -> tuple[float, ...]:
        """Every P threshold a level can turn on."""
        return (self.p_watch_leave, self.p_watch, self.p_at_risk_leave, self.p_at_risk)

    def __post_init__(self) -> None:
        _finite_positive("ftb_limit_um", self.ftb_limit_um)
        _finite_positive("l2l_limit_um", self.l2l_limit_um)
        if not (0.0 < self.p_watch <= self.p_at_risk <= 1.0):
            raise OverlayInputError(
                f"need 0 < p_watch <= p_at_risk <= 1, got {self.p_watch!r}, {self.p_at_risk!r}"
            )
        if not (0.0 < self.p_watch_leave <= self.p_watch):
            raise OverlayInputError(
                f"need 0 < p_watch_leave <= p_watch, got {self.p_watch_leave!r}, {self.p_watch!r}"
            )
        if not (0.0 < self.p_at_risk_leave <= self.p_at_risk):
            raise OverlayInputError(
                f"need 0 < p_at_risk_leave <= p_at_risk, got {self.p_at_risk_leave!r}, "
                f"{self.p_at_risk!r}"
            )
        if not (0.0 < self.watch_fraction <= 1.0):
            raise OverlayInputError(
                f"watch_fraction must be in (0, 1], got {self.watch_fraction!r}"
            )
        if self.resistance_limit_ohm is not None:
            _finite_positive("resistance_limit_ohm", self.resistance_limit_ohm)


@dataclass(frozen=True)
class RiskAssessment:
    """Outcome of ``assess``.

    Attributes
    ----------
    level : str
        One of ``RISK_LEVELS``.
    reasons : tuple of str
        Sentences with figures, for every rule that fired (at least one).
    rule : str
        Machine name of the deciding rule (see ``RULES``).
    """

    level: str
    reasons: tuple[str, ...]
    rule: str


def _direction(vx: float, vy: float) -> str:
    """'+x', '-y', ... or an angle from +x, counter-clockwise (panel frame)."""
    angle = math.degrees(math.atan2(vy, vx))
    for axis_angle, label in (
        (0.0, "+x"),
        (90.0, "+y"),
        (180.0, "-x"),
        (-90.0, "-y"),
        (-180.0, "-x"),
    ):
        if abs(angle - axis_angle) <= _AXIS_SNAP_DEG:
            return label
    return f"{angle % 360.0:.0f} deg from +x ({vx:+.1f} um in x, {vy:+.1f} um in y)"


def _layers(n: int) -> str:
    return f"{n} layer" if n == 1 else f"{n} layers"


def _um(value: float) -> str:
    # Forecast figures: whole microns are enough above 10 um, a decimal below.
    return f"{value:.0f}" if abs(value) >= 10.0 else f"{value:.1f}"


def _drift_reason(side: str, trend: SideTrend) -> str:
    vx, vy = trend.observed_per_layer_um
    n_obs = len(trend.observed_layers)
    size = math.hypot(vx, vy)
    if size < _NO_DRIFT_UM:
        head = f"Side {side} shows no net drift ({size:.1f} um/layer) over {_layers(n_obs)}"
    else:
        head = (
            f"Side {side} drifts {size:.1f} um/layer toward {_direction(vx, vy)} "
            f"(panel frame) over {_layers(n_obs)}"
        )
    n_rem = len(trend.remaining_layers)
    if n_rem == 0:
        return f"{head}; no layers remain on this side."
    px, py = trend.per_layer_um
    expect = math.hypot(px, py)
    toward = f" toward {_direction(px, py)}" if expect >= _NO_DRIFT_UM else ""
    return (
        f"{head}; the forecast expects {expect:.1f} um/layer{toward} from each of its "
        f"{n_rem} remaining layer{'s' if n_rem > 1 else ''} (it keeps {trend.weight:.0%} of "
        f"the side's own deviation from the expected layer)."
    )


def _remaining_phrase(forecast: Forecast) -> str:
    a, b = forecast.trend_a, forecast.trend_b
    n_a, n_b = len(a.remaining_layers), len(b.remaining_layers)
    if n_a == n_b:
        text = f"{_layers(n_a)} remain on each side"
    else:
        text = f"{_layers(n_a)} remain on side A and {n_b} on side B"
    missing = []
    for side, trend in (("A", a), ("B", b)):
        top = max(trend.observed_layers, default=0)
        gaps = [k for k in trend.remaining_layers if k < top]
        if gaps:
            names = ", ".join(str(k) for k in gaps)
            missing.append(f"side {side} layer{'s' if len(gaps) > 1 else ''} {names}")
    if missing:
        text += f" (not yet reported: {'; '.join(missing)})"
    return text


def _forecast_reasons(
    forecast: Forecast, thresholds: RiskThresholds, threshold_phrase: str
) -> list[str]:
    limit = thresholds.ftb_limit_um
    if forecast.complete:
        return [
            f"The stack is complete: final FTB {forecast.final_worst_um:.1f} um against a limit "
            f"of {limit:g} um; P(exceed) = {forecast.p_exceed:.2f}."
        ]
    reasons = [
        _drift_reason(side, trend)
        for side, trend in (("A", forecast.trend_a), ("B", forecast.trend_b))
        if trend.observed_layers
    ]
    lo, hi = forecast.band_um
    reasons.append(
        f"{_remaining_phrase(forecast)}; final FTB forecast {_um(forecast.final_worst_um)} um "
        f"(95% band {_um(lo)}-{_um(hi)} um) against a limit of {limit:g} um; "
        f"P(exceed) = {forecast.p_exceed:.2f}, {threshold_phrase}."
    )
    return reasons


def _at(point: Sequence[float] | FloatArray | None) -> str:
    if point is None:
        return ""
    x, y = (float(v) for v in point)
    return f" at ({x:.1f}, {y:.1f}) mm"


def assess(
    *,
    ftb_worst_um: float,
    ftb_worst_at_mm: Sequence[float] | FloatArray | None,
    l2l_worst_a_um: Mapping[int, float],
    l2l_worst_b_um: Mapping[int, float],
    forecast: Forecast | None,
    thresholds: RiskThresholds,
    resistance_ohm: float | None = None,
    previous_level: str | None = None,
) -> RiskAssessment:
    """Risk level of a panel, the deciding rule and the reasons for every rule that fires.

    Parameters
    ----------
    ftb_worst_um : float
        Current worst FTB length over the check points, um.
    ftb_worst_at_mm : sequence of 2 floats, or None
        Where it is (panel frame, mm).
    l2l_worst_a_um, l2l_worst_b_um : mapping of int to float
        Worst L2L length per observed layer (1-based) of each side, um.
    forecast : Forecast or None
        Forecast of the final FTB; None when there is none.
    thresholds : RiskThresholds
    resistance_ohm : float or None
        Resistance of the product's representative connection, when computed.
    previous_level : str or None
        The panel's level before this measurement (None for a new panel): the leave
        thresholds apply to a level the panel already has.

    Returns
    -------
    RiskAssessment
    """
    ftb = float(ftb_worst_um)
    if not (math.isfinite(ftb) and ftb >= 0.0):
        raise OverlayInputError(f"ftb_worst_um must be finite and >= 0, got {ftb_worst_um!r}")
    limit = thresholds.ftb_limit_um
    fired: dict[str, list[str]] = {}
    where = _at(ftb_worst_at_mm)

    if ftb > limit:
        fired["ftb_over_limit"] = [
            f"Current FTB {ftb:.1f} um{where} exceeds the {limit:g} um limit by "
            f"{ftb - limit:.1f} um."
        ]
    l2l: list[str] = []
    for side, worst in (("A", l2l_worst_a_um), ("B", l2l_worst_b_um)):
        for layer in sorted(worst):
            value = float(worst[layer])
            if not math.isfinite(value):
                raise OverlayInputError(f"side {side} layer {layer}: L2L worst is not finite")
            if value > thresholds.l2l_limit_um:
                l2l.append(
                    f"Side {side} layer {layer}: L2L worst {value:.1f} um exceeds the "
                    f"{thresholds.l2l_limit_um:g} um limit by "
                    f"{value - thresholds.l2l_limit_um:.1f} um."
                )
    if l2l:
        fired["l2l_over_limit"] = l2l
    r_limit = thresholds.resistance_limit_ohm
    if resistance_ohm is not None:
        if not math.isfinite(resistance_ohm):
            raise OverlayInputError(f"resistance_ohm must be finite, got {resistance_ohm!r}")
        if r_limit is not None and resistance_ohm > r_limit:
            fired["resistance_over_limit"] = [
                f"Connection resistance {resistance_ohm:.4g} ohm exceeds the {r_limit:.4g} ohm "
                f"limit (with the current FTB of {ftb:.1f} um added to its routed length)."
            ]
    before = -1 if previous_level is None else severity(previous_level)
    if forecast is not None:
        p = forecast.p_exceed
        if p >= thresholds.p_at_risk:
            fired["p_exceed_at_risk"] = _forecast_reasons(
                forecast,
                thresholds,
                f"at or above the {thresholds.p_at_risk:.2f} at-risk threshold",
            )
        elif before >= severity("at_risk") and p >= thresholds.p_at_risk_leave:
            fired["p_exceed_at_risk"] = _forecast_reasons(
                forecast,
                thresholds,
                f"still at risk: at or above the {thresholds.p_at_risk_leave:.2f} threshold "
                f"for leaving (entered at {thresholds.p_at_risk:.2f})",
            )
        elif p >= thresholds.p_watch:
            fired["p_exceed_watch"] = _forecast_reasons(
                forecast, thresholds, f"at or above the {thresholds.p_watch:.2f} watch threshold"
            )
        elif before >= severity("watch") and p >= thresholds.p_watch_leave:
            fired["p_exceed_watch"] = _forecast_reasons(
                forecast,
                thresholds,
                f"still watched: at or above the {thresholds.p_watch_leave:.2f} threshold for "
                f"leaving (entered at {thresholds.p_watch:.2f})",
            )
    if thresholds.watch_fraction * limit <= ftb <= limit:
        fired["ftb_near_limit"] = [
            f"Current FTB {ftb:.1f} um{where} is {ftb / limit:.0%} of the {limit:g} um limit "
            f"(watched from {thresholds.watch_fraction:.0%})."
        ]

    if not fired:
        text = f"Current FTB {ftb:.1f} um{where} is {ftb / limit:.0%} of the {limit:g} um limit"
        if forecast is None:
            text += "; no forecast."
        elif forecast.complete:
            text += f"; the stack is complete (P(exceed) = {forecast.p_exceed:.2f})."
        else:
            lo, hi = forecast.band_um
            text += (
                f"; final FTB forecast {_um(forecast.final_worst_um)} um (95% band "
                f"{_um(lo)}-{_um(hi)} um); P(exceed) = {forecast.p_exceed:.2f}, below the "
                f"{thresholds.p_watch:.2f} watch threshold."
            )
        return RiskAssessment(level="clear", reasons=(text,), rule="clear")

    ordered = [(rule, level) for rule, level in RULES if rule in fired]
    top = max(severity(level) for _, level in ordered)
    rule = next(rule for rule, level in ordered if severity(level) == top)
    reasons = tuple(sentence for name, _ in ordered for sentence in fired[name])
    return RiskAssessment(level=RISK_LEVELS[top], reasons=reasons, rule=rule)
