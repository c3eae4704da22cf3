from __future__ import annotations

from datetime import datetime
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field

from app.schemas.figures import PointOut, Ppm, Probability, Um, UmBand, UmPair, Urad
from app.schemas.text import Identifier, Name
from app.services.lifecycle import PanelStatus

RiskLevel = Literal["clear", "watch", "at_risk", "over_limit"]


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


class FtbRead(BaseModel):
    worst_um: Um
    worst_at_mm: PointOut
    points: list[FtbPoint]


class RemainingRead(BaseModel):
    A: list[int]
    B: list[int]


class ForecastRead(BaseModel):
    final_worst_um: Um = Field(description="Expected worst FTB over the check points at the "
                                  "last layer.")
    band_um: UmBand = Field(description="95 % band of the final worst FTB.")
    p_exceed: Probability = Field(
        description="Probability that the final worst FTB exceeds the limit.")
    p_exceed_stderr: Probability | None = Field(
        default=None, description="Monte Carlo standard error of p_exceed (states stored "
        "before it was reported have none).")
    samples: int | None = Field(
        default=None, description="Monte Carlo samples drawn: more near a risk threshold, until "
        "the level is decided at 95 % confidence.")
    remaining: RemainingRead
    method: str


class PanelRead(BaseModel):
    serial: str
    product: str
    lot: str
    status: PanelStatus
    layers: SidesInt = Field(description="Layers with a current measurement, per side.")
    missing_layers: SidesInt = Field(
        description="Layers below the highest measured one that have no measurement yet."
    )
    ftb: FtbRead
    l2l_worst_um: Um
    risk: RiskLevel
    reasons: list[str]
    forecast: ForecastRead | None
    updated_at: datetime


class PanelPage(BaseModel):
    items: list[PanelRead]
    next_cursor: str | None = Field(description="Pass as ?cursor= to get the next page.")


class StackLayerRead(BaseModel):
    side: Literal["A", "B"]
    layer: int
    measurement_id: str
    tool: str
    measured_at: datetime
    model: str
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
    cumulative_ftb_worst_um: Um = Field(
        description="Worst FTB over the check points using layers 1..layer of both sides."
    )
    side_position_um: UmPair = Field(
        description="This side's layers 1..layer summed at the worst check point (worst_at_mm): "
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
    worst_at_mm: PointOut = Field(description="The check point of the worst FTB now.")
    layers: list[StackLayerRead]
    residual_sigma_um: UmPair
    linear_worst_case_um: Um = Field(description="Planning figure, not the estimate.")
    rss_um: Um = Field(description="Planning figure, not the estimate.")
    stacked_via: StackedViaRead | None = None
