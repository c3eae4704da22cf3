from __future__ import annotations

from datetime import datetime
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field

from app.schemas import codes
from app.schemas.figures import LayersReached, PointOut, Ppm, Probability, Um, UmBand, UmPair, Urad
from app.schemas.text import Identifier, Name
from app.services.lifecycle import PanelStatus

RiskLevel = Literal["clear", "watch", "at_risk", "over_limit"]
FitModel = Literal["8_terms", "6_terms", "2_terms"]


class PanelCreate(BaseModel):
    model_config = ConfigDict(extra="forbid")

    serial: Identifier  # a path segment of /panels/{serial}: see app.schemas.text
    product: Identifier
    lot: Name


class SidesInt(BaseModel):
    A: list[int]
    B: list[int]


class FtbPoint(BaseModel):
    x_mm: float
    y_mm: float
    dx_um: Um
    dy_um: Um
    length_um: Um


class ForecastRead(BaseModel):
    ftb_final_forecast_um: Um = Field(
        description="Forecast final FTB: the expected worst FTB over the check points once "
        "every layer of both sides is on.")
    ftb_final_band_um: UmBand = Field(description="95 % band of the final FTB.")
    p_final_over_limit: Probability = Field(
        description="Probability that the final FTB ends over the product's FTB limit.")
    p_final_over_limit_stderr: Probability | None = Field(
        default=None, description="Monte Carlo standard error of p_final_over_limit (estimates "
        "stored before it was reported have none).")
    samples: int | None = Field(
        default=None, description="Monte Carlo samples drawn: more near a risk threshold, until "
        "the level is decided at 95 % confidence.")
    layers_to_come: SidesInt = Field(description="Layers not measured yet, per side.")
    method: str = Field(description="How the forecast was made, in a few words.")


class PanelRead(BaseModel):
    serial: str
    product: str
    lot: str
    status: PanelStatus = Field(**codes.explained(  # type: ignore[call-overload]
        "Where the panel is in its life.", codes.PANEL_STATUSES))
    layers_reached: LayersReached
    missing_layers: SidesInt = Field(
        description="Layers below the highest measured one that have no measurement yet."
    )
    ftb_current_um: Um = Field(description="Current FTB: the worst FTB over the product's check "
                               "points from the layers measured so far (both sides).")
    ftb_current_at_mm: PointOut = Field(description="The check point of the current FTB.")
    ftb_current_points: list[FtbPoint] = Field(
        description="The current FTB vector at every check point, panel frame.")
    l2l_worst_um: Um = Field(description="Worst L2L: the largest layer-to-layer overlay at a "
                             "check point over the measured layers.")
    risk: RiskLevel = Field(**codes.explained(  # type: ignore[call-overload]
        "What the overlay says of the panel (docs/glossary.md).", codes.RISK_LEVELS))
    risk_rule: str = Field(**codes.described(  # type: ignore[call-overload]
        "The rule that set the risk level.", codes.HOLD_RULES))
    reasons: list[str] = Field(description="Why, in plain words with the figures: one sentence "
                               "or more for every rule that fired.")
    forecast: ForecastRead | None
    updated_at: datetime


class PanelPage(BaseModel):
    items: list[PanelRead]
    next_cursor: str | None = Field(description="Pass as ?cursor= to get the next page.")


class StackLayerRead(BaseModel):
    side: Literal["A", "B"]
    layer: int
    measurement_id: str
    exposure_tool: str
    measured_at: datetime
    model: FitModel = Field(**codes.explained(  # type: ignore[call-overload]
        "The terms the layer's fit used.", codes.FIT_MODELS))
    note: str | None
    tx_um: Um
    ty_um: Um
    sx_ppm: Ppm
    sy_ppm: Ppm
    rotation_urad: Urad
    nonorthogonality_urad: Urad
    kx_um_per_mm2: float
    ky_um_per_mm2: float
    sigma_x_um: Um
    sigma_y_um: Um
    l2l_worst_um: Um
    ftb_through_layer_um: Um = Field(
        description="Worst FTB over the check points using layers 1..layer of both sides."
    )
    side_position_um: UmPair = Field(
        description="This side's layers 1..layer summed at the current FTB's check point: "
        "where the side's top layer sits relative to the core there, panel frame."
    )
    fit_se_um: float | None = Field(
        default=None,
        description="Bound on the fit's own standard error at the check points (fit guard).",
    )
    capture_margin_um: float | None = Field(
        default=None, description="(pad - via) / 2 of this layer's vias; with via settings."
    )
    p_miss: float | None = Field(
        default=None,
        description="Largest probability over the check points that a via misses part of its "
        "pad: P(|L2L| > capture margin).",
    )
    p_miss_at_mm: PointOut | None = None
    overhang_um: float | None = Field(
        default=None,
        description="Worst L2L minus the capture margin: > 0, the via runs past its pad edge.",
    )
    overlap_fraction: float | None = Field(
        default=None, description="Share of the via bottom on its pad at the worst point."
    )
    contact_resistance_ratio: float | None = Field(
        default=None,
        description="Via area over overlap area there (first-order); null when the via is off "
        "its pad entirely (overlap_fraction 0) or there are no via settings.",
    )


class StackedViaRead(BaseModel):
    """Extra resistance of a stacked-via chain from its lateral shifts: a figure, never a
    reason to hold (it is small beside the spread of plated copper)."""

    lateral_um: float = Field(description="sum over interfaces of |L2L| at the worst point.")
    at_mm: PointOut
    extra_ohm: float = Field(description="rho * lateral / (pad width * copper thickness).")
    chain_ohm: float | None = Field(description="The chain's own resistance (needs via depth).")
    relative: float | None = Field(description="extra_ohm / chain_ohm.")


class StackRead(BaseModel):
    serial: str
    frame: Literal["panel"] = "panel"
    ftb_current_at_mm: PointOut = Field(description="The check point of the current FTB.")
    layers: list[StackLayerRead]
    residual_sigma_um: UmPair
    linear_worst_case_um: Um = Field(description="Planning figure, not the estimate.")
    rss_um: Um = Field(description="Planning figure, not the estimate.")
    stacked_via: StackedViaRead | None = None
