"""The running estimate of one panel: computed from its fits in force (never from raw sites)
and stored with every accepted measurement.

Order of work: fits in force -> stack accumulation at the product's check points (core) ->
forecast of the final FTB (core, with the product's history) -> risk (core) -> ``Estimate``.
``compute`` needs no session, so the pipeline (``app.services.intake``) runs it before it takes
the write lock; ``store`` writes the result.
"""

from __future__ import annotations

import uuid
from dataclasses import dataclass, fields, replace
from datetime import datetime
from typing import Any

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session

from app.config import get_settings
from app.overlay.capture import InterfaceCapture, capture_all
from app.overlay.forecast import Forecast, forecast_final
from app.overlay.layer_history import ProductHistory
from app.overlay.model import evaluate
from app.overlay.resistance import RHO_COPPER_20C, StackedVia, stacked_via
from app.overlay.risk import RiskAssessment, RiskThresholds, assess
from app.overlay.stack import StackResult, accumulate
from app.services.products import check_points, via_geometry
from app.store.stored import (
    RemainingLayers,
    SidesLayers,
    StoredForecast,
    StoredPoint,
    StoredStack,
)
from app.store.tables import Fit, Measurement, PanelEstimate, Product, utcnow

#: What a state rebuild and the stack view read of each measurement in force: plain columns,
#: not ORM objects (for an import's hundreds of panels that is a tenth of the cost).
_LAYER_COLUMNS = (
    Measurement.panel,
    Measurement.side,
    Measurement.layer,
    Measurement.id,
    Measurement.exposure_tool,
    Measurement.measured_at,
    Fit.model,
    Fit.note,
    Fit.tx,
    Fit.ty,
    Fit.sx,
    Fit.sy,
    Fit.ox,
    Fit.oy,
    Fit.kx,
    Fit.ky,
    Fit.sigma_x_um,
    Fit.sigma_y_um,
    Fit.leverage,
)


@dataclass(frozen=True)
class CurrentLayer:
    """The measurement in force for one side and layer, with its fit (panel frame)."""

    measurement_id: uuid.UUID
    exposure_tool: str
    measured_at: datetime
    model: str
    note: str | None
    terms: np.ndarray  # (8,) Tx, Ty, Sx, Sy, Ox, Oy, Kx, Ky in um and um/mm
    sigma_um: tuple[float, float]
    #: The fit's largest leverage over the check points' reach (``app.overlay.fit``); fits
    #: stored before the fit guard have none and count as exact (0).
    leverage: float = 0.0

    @property
    def residual_var(self) -> tuple[float, float]:
        return (self.sigma_um[0] ** 2, self.sigma_um[1] ** 2)


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
        for r in rows:
            out[r.panel][r.side][r.layer] = CurrentLayer(
                measurement_id=r.id, exposure_tool=r.exposure_tool, measured_at=r.measured_at,
                model=r.model,
                note=r.note,
                terms=np.array([r.tx, r.ty, r.sx, r.sy, r.ox, r.oy, r.kx, r.ky], dtype=np.float64),
                sigma_um=(r.sigma_x_um, r.sigma_y_um), leverage=r.leverage or 0.0)
    return out


def current_layers(session: Session, serial: str) -> Layers:
    """The measurement in force for each side and layer of one panel."""
    return current_layers_many(session, [serial])[serial]


def _missing(present: list[int]) -> list[int]:
    top = max(present, default=0)
    return [k for k in range(1, top + 1) if k not in present]


def _finite(figures: Any) -> Any:
    """The figures with any infinite value (a via off its pad) as None, for JSON."""
    return replace(figures, **{f.name: None for f in fields(figures)
                               if isinstance(getattr(figures, f.name), float)
                               and not np.isfinite(getattr(figures, f.name))})


def _capture(
    product: Product, layers: Layers, points: np.ndarray
) -> tuple[list[InterfaceCapture], list[InterfaceCapture], StackedVia | None]:
    """Each interface's L2L offset with the fit's standard error and, with via settings, its
    capture figures; and the stacked-via extra resistance as a figure (a via off its pad has an
    infinite contact ratio, stored as None)."""
    vias = via_geometry(product)
    current = [(side, k, cl) for side in ("A", "B") for k, cl in sorted(layers[side].items())]
    terms = np.array([cl.terms for *_, cl in current]).reshape(-1, 8)
    faces = capture_all(
        faces=[(side, k) for side, k, _ in current],
        terms=terms,
        sigma_um=np.array([cl.sigma_um for *_, cl in current]).reshape(-1, 2),
        leverage=np.array([cl.leverage for *_, cl in current]),
        points_mm=points, vias=vias,
    )
    stored = [_finite(f) for f in faces]
    chain = None
    if vias is not None and product.copper_thickness_um and faces:
        lengths = np.hypot(*evaluate(terms, points[:, 0], points[:, 1]))
        figures = stacked_via(
            lengths, np.array([vias.diameters(f.layer)[0] for f in faces]), points,
            pad_width_um=product.pad_width_um or vias.pad_diameter_um,
            copper_thickness_um=product.copper_thickness_um, via_depth_um=product.via_depth_um,
            rho_ohm_m=product.resistivity_ohm_m or RHO_COPPER_20C,
        )
        chain = _finite(figures)
    return faces, stored, chain


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
        tools_a={k: cl.exposure_tool for k, cl in layers["A"].items()},
        tools_b={k: cl.exposure_tool for k, cl in layers["B"].items()},
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


def _stack_summary(l2l: dict[str, dict[int, float]], stack: StackResult,
                   capture: list[InterfaceCapture], chain: StackedVia | None) -> StoredStack:
    return StoredStack(
        l2l_worst_um=SidesLayers(A=l2l["A"], B=l2l["B"]),
        cumulative_worst_um=[float(v) for v in stack.cumulative_worst_um],
        residual_sigma_um=(float(stack.residual_sigma_um[0]), float(stack.residual_sigma_um[1])),
        linear_worst_case_um=float(stack.linear_worst_case_um),
        rss_um=float(stack.rss_um),
        capture=capture,
        stacked_via=chain,
    )


@dataclass(frozen=True)
class Estimate:
    """A panel's running estimate, as stored in ``panel_states``, with its risk assessment."""

    values: dict[str, Any]
    assessment: RiskAssessment
    all_layers_on: bool


def compute(
    *,
    serial: str,
    product: Product,
    layers: Layers,
    histories: ProductHistory,
    previous_level: str | None = None,
) -> Estimate:
    """The estimate of a panel whose fits in force are ``layers`` (no database access).

    ``previous_level`` is the panel's stored level before this change: the hysteresis of the
    levels (leave thresholds) applies to a level the panel already has.
    """
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
    thresholds = RiskThresholds(
        ftb_limit_um=product.ftb_limit_um,
        l2l_limit_um=product.l2l_limit_um,
        p_watch=product.p_watch,
        p_at_risk=product.p_at_risk,
        p_watch_leave=min(product.p_watch_leave, product.p_watch),
        p_at_risk_leave=min(product.p_at_risk_leave, product.p_at_risk),
    )
    forecast = _forecast(product, serial, layers, histories, thresholds, _seed(serial))
    l2l = {
        "A": {k: float(stack.l2l_worst_a_um[k - 1]) for k in order["A"]},
        "B": {k: float(stack.l2l_worst_b_um[k - 1]) for k in order["B"]},
    }
    faces, capture, chain = _capture(product, layers, points)
    assessment = assess(
        ftb_worst_um=stack.worst_um,
        ftb_worst_at_mm=stack.worst_at_mm,
        interfaces=faces,
        forecast=forecast,
        thresholds=thresholds,
        previous_level=previous_level,
    )
    points_out = [
        StoredPoint(x_mm=float(p[0]), y_mm=float(p[1]), dx_um=float(v[0]), dy_um=float(v[1]),
                    length_um=float(n))
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
        "stack": _stack_summary(l2l, stack, capture, chain),
        "forecast": StoredForecast(
            final_worst_um=forecast.final_worst_um,
            band_um=(float(forecast.band_um[0]), float(forecast.band_um[1])),
            p_exceed=forecast.p_exceed,
            p_exceed_stderr=forecast.p_stderr,
            samples=forecast.exceedance.n_samples,
            decided=forecast.exceedance.decided,
            tool=forecast.tool,
            remaining=RemainingLayers(A=list(forecast.trend_a.remaining_layers),
                                      B=list(forecast.trend_b.remaining_layers)),
            method=forecast.method,
            final_terms=[float(v) for v in forecast.final_mean_terms],
            final_terms_sd=[float(v) for v in np.sqrt(np.diag(forecast.final_cov_terms))],
        ),
        "p_exceed": forecast.p_exceed,
        "risk": assessment.level,
        "risk_rule": assessment.rule,
        "reasons": list(assessment.reasons),
    }
    full = product.layers_per_side
    return Estimate(values=values, assessment=assessment,
                    all_layers_on=len(order["A"]) == full and len(order["B"]) == full)


def store(session: Session, *, serial: str, estimate: Estimate,
          existing: PanelEstimate | None = None) -> PanelEstimate:
    """Write the estimate into the panel's state row (created at registration)."""
    state = existing if existing is not None else session.get(PanelEstimate, serial)
    values = {**estimate.values, "updated_at": utcnow()}
    if state is None:
        state = PanelEstimate(panel=serial, **values)
        session.add(state)
    else:
        for k, v in values.items():
            setattr(state, k, v)
    return state
