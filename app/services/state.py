"""The running estimate of one panel: rebuilt from its current fits (never from raw sites) in
the same transaction as every accepted measurement.

Order of work: current fits -> stack accumulation at the product's check points (core) ->
forecast of the final FTB (core, with the product's history) -> risk (core) -> stored state.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from sqlalchemy import Row, select
from sqlalchemy.orm import Session

from app.config import get_settings
from app.overlay.forecast import Forecast, forecast_final
from app.overlay.layer_history import ProductHistory
from app.overlay.resistance import RHO_COPPER_20C, resistance_ohm
from app.overlay.risk import RiskAssessment, RiskThresholds, assess
from app.overlay.stack import StackResult, accumulate
from app.services.history import product_history
from app.services.products import check_points
from app.store.tables import Fit, Measurement, Panel, PanelState, Product, utcnow

#: What a state rebuild and the stack view read of each measurement in force: plain columns,
#: not ORM objects (for an import's hundreds of panels that is a tenth of the cost).
_LAYER_COLUMNS = (
    Measurement.panel, Measurement.side, Measurement.layer, Measurement.id, Measurement.tool,
    Measurement.measured_at, Fit.model, Fit.note, Fit.tx, Fit.ty, Fit.sx, Fit.sy, Fit.ox,
    Fit.oy, Fit.kx, Fit.ky, Fit.sigma_x_um, Fit.sigma_y_um,
)


@dataclass(frozen=True)
class CurrentLayer:
    """The measurement in force for one side and layer, with its fit (panel frame)."""

    row: Row[Any]

    @property
    def terms(self) -> np.ndarray:
        r = self.row
        return np.array([r.tx, r.ty, r.sx, r.sy, r.ox, r.oy, r.kx, r.ky], dtype=np.float64)

    @property
    def residual_var(self) -> tuple[float, float]:
        return (self.row.sigma_x_um**2, self.row.sigma_y_um**2)


Layers = dict[str, dict[int, CurrentLayer]]

#: Monte Carlo of the forecast: start with this many samples and grow, up to
#: FORECAST_MAX_FACTOR times ``forecast_samples``, until the level is decided at this confidence.
FORECAST_FIRST_SAMPLES = 500
FORECAST_MAX_FACTOR = 8
FORECAST_CONFIDENCE = 0.95


def current_layers_many(session: Session, serials: list[str]) -> dict[str, Layers]:
    """The measurement in force (not superseded) for each side and layer of each panel."""
    out: dict[str, Layers] = {s: {"A": {}, "B": {}} for s in serials}
    for start in range(0, len(serials), 500):
        rows = session.execute(
            select(*_LAYER_COLUMNS)
            .join(Fit, (Fit.panel == Measurement.panel) & (Fit.measurement_id == Measurement.id))
            .where(Measurement.panel.in_(serials[start:start + 500]),
                   Measurement.superseded_by.is_(None))
        ).all()
        for row in rows:
            out[row.panel][row.side][row.layer] = CurrentLayer(row)
    return out


def current_layers(session: Session, serial: str) -> Layers:
    """The measurement in force for each side and layer of one panel."""
    return current_layers_many(session, [serial])[serial]


def _missing(present: list[int]) -> list[int]:
    top = max(present, default=0)
    return [k for k in range(1, top + 1) if k not in present]


def _resistance(product: Product, ftb_worst_um: float) -> float | None:
    """Resistance of the product's representative connection when the FTB misregistration
    adds to its routed length: R = rho (L + dL) / (w t) (DOMAIN.md, resistance impact)."""
    c = product.connection
    if not c:
        return None
    return resistance_ohm(
        (c["length_um"] + ftb_worst_um) * 1e-6,
        c["width_um"] * 1e-6,
        c["thickness_um"] * 1e-6,
        rho_ohm_m=c.get("resistivity_ohm_m", RHO_COPPER_20C),
    )


def _forecast(
    product: Product,
    serial: str,
    layers: dict[str, dict[int, CurrentLayer]],
    history: ProductHistory,
    thresholds: RiskThresholds,
    seed: int,
) -> Forecast:
    # The forecast is of the quantity that judges the panel: the layer models at the check
    # points. Per-site fit residuals are not part of the final FTB and are not added.
    samples = get_settings().forecast_samples
    return forecast_final(
        observed_a={k: cl.terms for k, cl in layers["A"].items()},
        observed_b={k: cl.terms for k, cl in layers["B"].items()},
        tools_a={k: cl.row.tool for k, cl in layers["A"].items()},
        tools_b={k: cl.row.tool for k, cl in layers["B"].items()},
        history=history,
        panel_id=serial,
        points_mm=check_points(product),
        ftb_limit_um=product.ftb_limit_um,
        decide_at=thresholds.decision_points(),
        confidence=FORECAST_CONFIDENCE,
        n_start=min(FORECAST_FIRST_SAMPLES, samples),
        n_max=FORECAST_MAX_FACTOR * samples,
        seed=seed,
    )


def _seed(serial: str) -> int:
    # A stable per-panel seed, so the same data always gives the same p_exceed.
    return int.from_bytes(serial.encode("utf-8")[-8:].rjust(8, b"\0"), "big") % (2**32)


def _stack_summary(l2l: dict[str, dict[int, float]], stack: StackResult) -> dict[str, Any]:
    """What the stack view shows; ``cumulative_worst_um[k-1]`` is FTB over layers 1..k."""
    return {
        "l2l_worst_um": {side: {str(k): v for k, v in l2l[side].items()} for side in ("A", "B")},
        "cumulative_worst_um": [float(v) for v in stack.cumulative_worst_um],
        "residual_sigma_um": list(stack.residual_sigma_um),
        "linear_worst_case_um": stack.linear_worst_case_um,
        "rss_um": stack.rss_um,
    }


def refresh(
    session: Session,
    *,
    panel: Panel,
    product: Product,
    histories: ProductHistory | None = None,
    layers: Layers | None = None,
) -> tuple[PanelState, RiskAssessment]:
    """Recompute and store the panel's state; returns it with the risk assessment.

    ``histories`` (the product's history) and ``layers`` may be given by a caller that loaded
    them for many panels.
    """
    if layers is None:
        layers = current_layers(session, panel.serial)
    order = {s: sorted(layers[s]) for s in ("A", "B")}

    def stacked(side: str) -> tuple[np.ndarray, np.ndarray]:
        # Dense by layer number (row k-1 is layer k; a missing layer adds nothing yet), so that
        # the cumulative figures are "layers 1..k", whatever arrived out of order.
        top = max(order[side], default=0)
        terms, var = np.zeros((top, 8)), np.zeros((top, 2))
        for k in order[side]:
            terms[k - 1] = layers[side][k].terms
            var[k - 1] = layers[side][k].residual_var
        return terms, var

    terms_a, var_a = stacked("A")
    terms_b, var_b = stacked("B")
    points = check_points(product)
    stack = accumulate(
        terms_a, terms_b, points, residual_var_a=var_a, residual_var_b=var_b
    )
    if histories is None:
        histories = product_history(session, product=product)
    thresholds = RiskThresholds(
        ftb_limit_um=product.ftb_limit_um,
        l2l_limit_um=product.l2l_limit_um,
        p_watch=product.p_watch,
        p_at_risk=product.p_at_risk,
        p_watch_leave=min(product.p_watch_leave, product.p_watch),
        p_at_risk_leave=min(product.p_at_risk_leave, product.p_at_risk),
        resistance_limit_ohm=(product.connection or {}).get("resistance_limit_ohm"),
    )
    forecast = _forecast(product, panel.serial, layers, histories, thresholds,
                         _seed(panel.serial))
    # Hysteresis: the level the panel had before this measurement decides which thresholds apply.
    state = session.get(PanelState, panel.serial)
    previous = state.risk if state is not None else None
    l2l = {
        "A": {k: float(stack.l2l_worst_a_um[k - 1]) for k in order["A"]},
        "B": {k: float(stack.l2l_worst_b_um[k - 1]) for k in order["B"]},
    }
    resistance = _resistance(product, stack.worst_um)
    assessment = assess(
        ftb_worst_um=stack.worst_um,
        ftb_worst_at_mm=stack.worst_at_mm,
        l2l_worst_a_um=l2l["A"],
        l2l_worst_b_um=l2l["B"],
        forecast=forecast,
        thresholds=thresholds,
        resistance_ohm=resistance,
        previous_level=previous,
    )
    points_out = [
        {
            "x_mm": float(p[0]),
            "y_mm": float(p[1]),
            "dx_um": float(v[0]),
            "dy_um": float(v[1]),
            "length_um": float(n),
        }
        for p, v, n in zip(points, stack.ftb_um, stack.ftb_length_um, strict=True)
    ]
    values: dict[str, Any] = {
        "layers_a": order["A"],
        "layers_b": order["B"],
        "missing_a": _missing(order["A"]),
        "missing_b": _missing(order["B"]),
        "ftb_worst_um": float(stack.worst_um),
        "ftb_worst_x_mm": float(stack.worst_at_mm[0]),
        "ftb_worst_y_mm": float(stack.worst_at_mm[1]),
        "ftb_points": points_out,
        "l2l_worst_um": float(max([*l2l["A"].values(), *l2l["B"].values()], default=0.0)),
        "stack": {**_stack_summary(l2l, stack), "resistance_ohm": resistance},
        "forecast": {
            "final_worst_um": forecast.final_worst_um,
            "band_um": list(forecast.band_um),
            "p_exceed": forecast.p_exceed,
            "p_exceed_stderr": forecast.p_stderr,
            "samples": forecast.exceedance.n_samples,
            "decided": forecast.exceedance.decided,
            "tool": forecast.tool,
            "remaining": {
                "A": list(forecast.trend_a.remaining_layers),
                "B": list(forecast.trend_b.remaining_layers),
            },
            "method": forecast.method,
            # Final FTB terms (panel frame, raw units) and their sd: what a calibration check
            # compares with the panel's true final terms.
            "final_terms": [float(v) for v in forecast.final_mean_terms],
            "final_terms_sd": [float(v) for v in np.sqrt(np.diag(forecast.final_cov_terms))],
        },
        "p_exceed": forecast.p_exceed,
        "risk": assessment.level,
        "risk_rule": assessment.rule,
        "reasons": list(assessment.reasons),
        "updated_at": utcnow(),
    }
    if state is None:
        state = PanelState(panel=panel.serial, **values)
        session.add(state)
    else:
        for k, v in values.items():
            setattr(state, k, v)
    full = product.layers_per_side
    if panel.status == "in_process" and len(order["A"]) == full and len(order["B"]) == full:
        panel.status = "complete"
    return state, assessment
