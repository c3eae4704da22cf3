"""Risk level of a panel from its current overlay and the forecast of its final FTB.

Rules, most severe first (``RULES``); the level is the most severe rule that fires, ``rule``
names the first of those, and ``reasons`` holds one or more sentences for *every* rule that
fires, so that an engineer sees all causes (a side's drift and an L2L over limit, say):

=======================  ==========  =====================================================
rule                     level       fires when
=======================  ==========  =====================================================
current_ftb_over_limit   over_limit  current worst FTB > FTB limit
via_off_pad              over_limit  a layer's fitted L2L offset passes its vias' capture
                                     margin by more than 2 fit standard errors (products
                                     with via settings)
l2l_over_limit           over_limit  a layer's worst L2L passes the L2L limit by more than 2
                                     fit standard errors (products without via settings)
forecast_at_risk         at_risk     forecast P(final FTB > limit) >= p_at_risk, or the panel
                                     was at_risk (or over) before and P >= p_at_risk_leave
via_miss_at_risk         at_risk     P(a via misses part of its pad) >= p_at_risk somewhere
forecast_watch           watch       forecast P(final FTB > limit) >= p_watch, or the panel
                                     was watched (or worse) before and P >= p_watch_leave
via_miss_watch           watch       P(a via misses part of its pad) >= p_watch somewhere
current_ftb_near_limit   watch       current worst FTB >= watch_fraction * FTB limit
clear                    clear       none of the above
=======================  ==========  =====================================================

L2L and the fit's own uncertainty: a layer's offset at the check points is its fitted model,
known only to the fit's standard error there (``capture.InterfaceCapture.model_se_um``, from the
fit guard's leverage). A layer is over a limit only when the offset passes it by more than
``SE_FACTOR`` = 2 of those standard errors: under a normal error that is about 98 % one-sided
confidence that the offset really is over, so a noisy fit alone does not put a panel over limit.
With via settings the capture margin m = (D_pad - D_via) / 2 judges L2L instead of the product's
L2L limit, and the miss probability P(|d| > m) (``capture``) gives the watch and at-risk levels;
the stacked-via extra resistance is a figure in the stack, never a rule.
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

from app.overlay.capture import InterfaceCapture
from app.overlay.errors import OverlayInputError
from app.overlay.forecast import Forecast, SideTrend
from app.overlay.model import FloatArray

RISK_LEVELS: Final = ("clear", "watch", "at_risk", "over_limit")
#: (rule, level), most severe first; the order in which reasons are listed.
RULES: Final = (
    ("current_ftb_over_limit", "over_limit"),
    ("via_off_pad", "over_limit"),
    ("l2l_over_limit", "over_limit"),
    ("forecast_at_risk", "at_risk"),
    ("via_miss_at_risk", "at_risk"),
    ("forecast_watch", "watch"),
    ("via_miss_watch", "watch"),
    ("current_ftb_near_limit", "watch"),
    ("clear", "clear"),
)
#: A layer is over a limit when its offset passes it by more than this many of the fit's own
#: standard errors (about 98 % one-sided confidence under a normal error).
SE_FACTOR: Final = 2.0
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
        P(final over limit) from which a panel is watched or at risk; 0 < p_watch <= p_at_risk <= 1.
    watch_fraction : float
        Current FTB from this share of the limit is watched (0.70, common practice).
    p_watch_leave, p_at_risk_leave : float
        A watched (at-risk) panel leaves that level only when P falls below these;
        0 < p_watch_leave <= p_watch and 0 < p_at_risk_leave <= p_at_risk.

    Why p_at_risk defaults to 0.50: a panel is held when the forecast says it is more likely
    than not to end over the limit. If P were exactly the conditional expectation of the outcome
    given the layers measured so far (the exact posterior; this forecast comes close to it on
    the simulated lines, docs/forecast.md), P would be a martingale as layers arrive, and by
    optional stopping (Williams, *Probability with Martingales*, 1991, ch. 10) the share of
    panels held on P that really fail would be the mean P at which they were held: at least
    p_at_risk. On the simulated lines even the exact posterior, held at 0.20, held more than two
    panels that pass for every one that fails (hit rate 0.29-0.32). Panels from p_watch to
    p_at_risk are watched, not held; docs/forecast.md measures both and the trade-off against
    missed failures.
    """

    ftb_limit_um: float
    l2l_limit_um: float
    p_watch: float = 0.05
    p_at_risk: float = 0.50
    watch_fraction: float = 0.70
    p_watch_leave: float = 0.02
    p_at_risk_leave: float = 0.25

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
    return f"{angle % 360.0:.0f} deg from +x, {vx:+.1f} um in x and {vy:+.1f} um in y"


def _layers(n: int) -> str:
    return f"{n} layer" if n == 1 else f"{n} layers"


def _um(value: float) -> str:
    # Forecast figures: whole microns are enough above 10 um, a decimal below.
    return f"{value:.0f}" if abs(value) >= 10.0 else f"{value:.1f}"


def _pct(p: float) -> str:
    return f"{p:.0%}".replace("%", " %")


def _chance(p: float) -> str:
    """A probability as the line says it, never 0 % or 100 % (it is a sampled estimate)."""
    if p < 0.01:
        return "less than a 1 % chance"
    if p > 0.99:
        return "more than a 99 % chance"
    return f"a {_pct(p)} chance"


def _so_far(n: int) -> str:
    return "its one layer so far" if n == 1 else f"its {n} layers so far"


def _drift_reason(side: str, trend: SideTrend) -> str:
    vx, vy = trend.observed_per_layer_um
    n_obs = len(trend.observed_layers)
    size = math.hypot(vx, vy)
    if size < _NO_DRIFT_UM:
        head = f"Side {side} has not moved one way over {_so_far(n_obs)}"
    else:
        head = (
            f"Side {side} has moved {size:.1f} um a layer toward {_direction(vx, vy)} "
            f"(panel frame) over {_so_far(n_obs)}"
        )
    n_rem = len(trend.remaining_layers)
    if n_rem == 0:
        return f"{head}; it has no layers to come."
    px, py = trend.per_layer_um
    expect = math.hypot(px, py)
    each = "its one layer to come" if n_rem == 1 else f"each of its {n_rem} layers to come"
    if expect < _NO_DRIFT_UM:
        return f"{head}; {each} is expected to add nothing on average."
    return f"{head}; {each} is expected to add {expect:.1f} um toward {_direction(px, py)}."


#: Index of the iso scale (Sx + Sy) / 2 in the forecast's components (layer_history.COMPONENTS).
_SCALE_COMPONENT: Final = 2
#: A panel's scale is named as growing when the trending class is at least this likely for it.
_GROWING_POSTERIOR: Final = 0.5
_PPM_PER_UM_MM: Final = 1e3


def _scale_reason(forecast: Forecast) -> str | None:
    """A sentence on a growing scale when the forecast holds the panel's scale as trending: the
    cause that a translation drift sentence does not show (a core that grows layer by layer)."""
    weight = float(forecast.trending[_SCALE_COMPONENT])
    if weight < _GROWING_POSTERIOR:
        return None
    now = _PPM_PER_UM_MM * 0.5 * float(forecast.current_terms[2] + forecast.current_terms[3])
    final = _PPM_PER_UM_MM * 0.5 * float(forecast.final_mean_terms[2]
                                         + forecast.final_mean_terms[3])
    # An estimate, so never "100 %" (as _chance).
    likely = "more than 99 %" if weight > 0.99 else _pct(weight)
    return (
        f"Its scale changes layer by layer, the way a growing core does ({likely} likely "
        f"from its layers so far): the FTB scale is {now:+.1f} ppm now and expected near "
        f"{final:+.1f} ppm when every layer is on."
    )


def _remaining_phrase(forecast: Forecast) -> str:
    a, b = forecast.trend_a, forecast.trend_b
    n_a, n_b = len(a.remaining_layers), len(b.remaining_layers)
    if n_a == n_b:
        text = f"With {_layers(n_a)} to come on each side"
    elif n_a == 0:
        text = f"With {_layers(n_b)} to come on side B and none on side A"
    elif n_b == 0:
        text = f"With {_layers(n_a)} to come on side A and none on side B"
    else:
        text = f"With {_layers(n_a)} to come on side A and {n_b} on side B"
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
        final = forecast.final_worst_um
        against = (f"{final - limit:.1f} um over the {limit:g} um limit" if final > limit
                   else f"{_pct(final / limit)} of the {limit:g} um limit")
        return [f"Every layer is on: the final FTB is {final:.1f} um, {against}."]
    reasons = [
        _drift_reason(side, trend)
        for side, trend in (("A", forecast.trend_a), ("B", forecast.trend_b))
        if trend.observed_layers
    ]
    scale = _scale_reason(forecast)
    if scale:
        reasons.append(scale)
    lo, hi = forecast.band_um
    reasons.append(
        f"{_remaining_phrase(forecast)}, the final FTB is expected near "
        f"{_um(forecast.final_worst_um)} um (95 % band {_um(lo)}-{_um(hi)} um) against the "
        f"{limit:g} um limit: {_chance(forecast.p_exceed)} of ending over it, "
        f"{threshold_phrase}."
    )
    return reasons


def _l2l_limit_reasons(
    rows: Sequence[tuple[str, int, float, tuple[float, float] | None, float]], limit: float
) -> list[str]:
    """L2L against the product's limit: (side, layer, worst, where, fit standard error)."""
    out = []
    for side, layer, value, at, se in rows:
        if not math.isfinite(value):
            raise OverlayInputError(f"side {side} layer {layer}: L2L worst is not finite")
        if value - SE_FACTOR * se > limit:
            known = f" (the fit is good to {se:.1f} um there)" if se > 0.0 else ""
            out.append(
                f"Side {side} layer {layer} sits {value:.1f} um off the layer beneath{_at(at)}: "
                f"{value - limit:.1f} um over the {limit:g} um L2L limit{known}."
            )
    return out


def _landing(c: InterfaceCapture) -> str:
    ratio = c.resistance_ratio
    if ratio is None or ratio == 1.0:
        return ""
    if math.isinf(ratio):
        return "; the via bottom is off its pad entirely (an open)"
    share = c.overlap_fraction or 0.0
    return (
        f"; {_pct(share)} of the via bottom stays on its pad, so its contact resistance is "
        f"about {ratio:.1f} x the usual (via area over overlap, first-order)"
    )


def _capture_reasons(
    interfaces: Sequence[InterfaceCapture], thresholds: RiskThresholds
) -> dict[str, list[str]]:
    """Reasons of the via rules, by rule, for interfaces with a capture margin."""
    fired: dict[str, list[str]] = {}
    for c in interfaces:
        if c.margin_um is None or c.p_miss is None or c.overhang_um is None:
            continue
        where = f"side {c.side}"
        if c.overhang_um - SE_FACTOR * c.model_se_um > 0.0:
            fired.setdefault("via_off_pad", []).append(
                f"Via on layer {c.layer} {where} can miss its pad by {c.overhang_um:.1f} um"
                f"{_at(c.worst_at_mm)}: the layer sits {c.worst_um:.1f} um off the layer "
                f"beneath, against a capture margin of {c.margin_um:.1f} um (the fit is good "
                f"to {c.model_se_um:.1f} um there){_landing(c)}."
            )
            continue
        for rule, level, name in (
            ("via_miss_at_risk", thresholds.p_at_risk, "at-risk"),
            ("via_miss_watch", thresholds.p_watch, "watch"),
        ):
            if c.p_miss >= level:
                fired.setdefault(rule, []).append(
                    f"Vias on layer {c.layer} {where} have {_chance(c.p_miss)} of "
                    f"missing part of their pad{_at(c.p_miss_at_mm)} ({name} threshold "
                    f"{_pct(level)}): the layer sits up to {c.worst_um:.1f} um off the layer "
                    f"beneath, against a capture margin of {c.margin_um:.1f} um."
                )
                break
    return fired


def _at(point: Sequence[float] | FloatArray | None) -> str:
    if point is None:
        return ""
    x, y = (float(v) for v in point)
    return f" at ({x:.1f}, {y:.1f}) mm"


def assess(
    *,
    ftb_worst_um: float,
    ftb_worst_at_mm: Sequence[float] | FloatArray | None,
    forecast: Forecast | None,
    thresholds: RiskThresholds,
    l2l_worst_a_um: Mapping[int, float] | None = None,
    l2l_worst_b_um: Mapping[int, float] | None = None,
    interfaces: Sequence[InterfaceCapture] | None = None,
    previous_level: str | None = None,
) -> RiskAssessment:
    """Risk level of a panel, the deciding rule and the reasons for every rule that fires.

    Parameters
    ----------
    ftb_worst_um : float
        Current worst FTB length over the check points, um.
    ftb_worst_at_mm : sequence of 2 floats, or None
        Where it is (panel frame, mm).
    forecast : Forecast or None
        Forecast of the final FTB; None when there is none.
    thresholds : RiskThresholds
    l2l_worst_a_um, l2l_worst_b_um : mapping of int to float, optional
        Worst L2L length per observed layer (1-based) of each side, um, judged against the L2L
        limit as exact figures. Used only without ``interfaces``.
    interfaces : sequence of InterfaceCapture, optional
        Per side and layer, the L2L offset with the fit's standard error and, for a product
        with via settings, its capture figures (``capture.interface_capture``). With a capture
        margin the via rules judge the layer; without one, the L2L limit does.
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
        fired["current_ftb_over_limit"] = [
            f"Current FTB {ftb:.1f} um{where} is {ftb - limit:.1f} um over the {limit:g} um "
            "limit already."
        ]
    rows: list[tuple[str, int, float, tuple[float, float] | None, float]]
    if interfaces is None:
        rows = [
            (side, layer, float(worst[layer]), None, 0.0)
            for side, worst in (("A", l2l_worst_a_um or {}), ("B", l2l_worst_b_um or {}))
            for layer in sorted(worst)
        ]
    else:
        ordered_faces = sorted(interfaces, key=lambda c: (c.side, c.layer))
        rows = [
            (c.side, c.layer, c.worst_um, c.worst_at_mm, c.model_se_um)
            for c in ordered_faces
            if c.margin_um is None
        ]
        fired.update(_capture_reasons(ordered_faces, thresholds))
    l2l = _l2l_limit_reasons(rows, thresholds.l2l_limit_um)
    if l2l:
        fired["l2l_over_limit"] = l2l
    before = -1 if previous_level is None else severity(previous_level)
    if forecast is not None:
        p = forecast.p_exceed
        if p >= thresholds.p_at_risk:
            fired["forecast_at_risk"] = _forecast_reasons(
                forecast,
                thresholds,
                f"at or above the {_pct(thresholds.p_at_risk)} at-risk threshold",
            )
        elif before >= severity("at_risk") and p >= thresholds.p_at_risk_leave:
            fired["forecast_at_risk"] = _forecast_reasons(
                forecast,
                thresholds,
                f"so it stays at risk (it leaves below {_pct(thresholds.p_at_risk_leave)}; "
                f"it entered at {_pct(thresholds.p_at_risk)})",
            )
        elif p >= thresholds.p_watch:
            fired["forecast_watch"] = _forecast_reasons(
                forecast, thresholds,
                f"at or above the {_pct(thresholds.p_watch)} watch threshold"
            )
        elif before >= severity("watch") and p >= thresholds.p_watch_leave:
            fired["forecast_watch"] = _forecast_reasons(
                forecast,
                thresholds,
                f"so it stays watched (it leaves below {_pct(thresholds.p_watch_leave)}; "
                f"it entered at {_pct(thresholds.p_watch)})",
            )
    if thresholds.watch_fraction * limit <= ftb <= limit:
        fired["current_ftb_near_limit"] = [
            f"Current FTB {ftb:.1f} um{where} is {_pct(ftb / limit)} of the {limit:g} um limit "
            f"(watched from {_pct(thresholds.watch_fraction)})."
        ]

    if not fired:
        text = f"Current FTB {ftb:.1f} um{where} is {_pct(ftb / limit)} of the {limit:g} um limit"
        if forecast is None:
            text += "; no forecast."
        elif forecast.complete:
            text += "; every layer is on."
        else:
            lo, hi = forecast.band_um
            text += (
                f"; the final FTB is expected near {_um(forecast.final_worst_um)} um (95 % band "
                f"{_um(lo)}-{_um(hi)} um): {_chance(forecast.p_exceed)} of ending over "
                f"the limit, below the {_pct(thresholds.p_watch)} watch threshold."
            )
        return RiskAssessment(level="clear", reasons=(text,), rule="clear")

    ordered = [(rule, level) for rule, level in RULES if rule in fired]
    top = max(severity(level) for _, level in ordered)
    rule = next(rule for rule, level in ordered if severity(level) == top)
    reasons = tuple(sentence for name, _ in ordered for sentence in fired[name])
    return RiskAssessment(level=RISK_LEVELS[top], reasons=reasons, rule=rule)
