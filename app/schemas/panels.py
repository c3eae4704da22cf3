from __future__ import annotations

from datetime import datetime
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field

from app.schemas.figures import PointOut, Ppm, Probability, Um, UmBand, UmPair, Urad
from app.schemas.text import Identifier, Name

PanelStatus = Literal["in_process", "on_hold", "scrapped", "complete"]
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


class StackRead(BaseModel):
    serial: str
    frame: Literal["panel"] = "panel"
    layers: list[StackLayerRead]
    residual_sigma_um: UmPair
    linear_worst_case_um: Um = Field(description="Planning figure, not the estimate.")
    rss_um: Um = Field(description="Planning figure, not the estimate.")
