from __future__ import annotations

from datetime import datetime
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field

PanelStatus = Literal["in_process", "on_hold", "scrapped", "complete"]
RiskLevel = Literal["clear", "watch", "at_risk", "over_limit"]


class PanelCreate(BaseModel):
    model_config = ConfigDict(extra="forbid")

    # No "/": a serial is a path segment of /panels/{serial}.
    serial: str = Field(min_length=1, max_length=64, pattern=r"^[A-Za-z0-9._:-]+$")
    product: str = Field(min_length=1, max_length=64)
    lot: str = Field(min_length=1, max_length=64)


class SidesInt(BaseModel):
    A: list[int]
    B: list[int]


class FtbPoint(BaseModel):
    x_mm: float
    y_mm: float
    dx_um: float
    dy_um: float
    length_um: float


class FtbRead(BaseModel):
    worst_um: float
    worst_at_mm: tuple[float, float]
    points: list[FtbPoint]


class RemainingRead(BaseModel):
    A: list[int]
    B: list[int]


class ForecastRead(BaseModel):
    final_worst_um: float = Field(description="Expected worst FTB over the check points at the "
                                  "last layer.")
    band_um: tuple[float, float] = Field(description="95 % band of the final worst FTB.")
    p_exceed: float = Field(description="Probability that the final worst FTB exceeds the limit.")
    p_exceed_stderr: float | None = Field(
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
    l2l_worst_um: float
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
    tx_um: float
    ty_um: float
    sx_ppm: float
    sy_ppm: float
    rotation_urad: float
    nonorthogonality_urad: float
    kx_um_per_mm2: float
    ky_um_per_mm2: float
    sigma_x_um: float
    sigma_y_um: float
    l2l_worst_um: float
    cumulative_ftb_worst_um: float = Field(
        description="Worst FTB over the check points using layers 1..layer of both sides."
    )


class StackRead(BaseModel):
    serial: str
    frame: Literal["panel"] = "panel"
    layers: list[StackLayerRead]
    residual_sigma_um: tuple[float, float]
    linear_worst_case_um: float = Field(description="Planning figure, not the estimate.")
    rss_um: float = Field(description="Planning figure, not the estimate.")
