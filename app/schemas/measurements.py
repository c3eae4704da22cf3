from __future__ import annotations

import math
from datetime import datetime
from typing import Literal

from pydantic import AwareDatetime, BaseModel, ConfigDict, Field, field_validator

from app.schemas.panels import PanelRead


class SiteIn(BaseModel):
    model_config = ConfigDict(extra="forbid")

    x_mm: float
    y_mm: float
    dx_um: float
    dy_um: float

    @field_validator("x_mm", "y_mm", "dx_um", "dy_um")
    @classmethod
    def _finite(cls, v: float) -> float:
        if not math.isfinite(v):
            raise ValueError("must be a finite number")
        return v


class MeasurementCreate(BaseModel):
    model_config = ConfigDict(extra="forbid")

    panel: str = Field(min_length=1, max_length=64)
    layer: int
    side: Literal["A", "B"]
    frame: Literal["tool", "panel"] = "tool"
    tool: str = Field(min_length=1, max_length=64)
    measured_at: AwareDatetime
    sites: list[SiteIn]


class FitRead(BaseModel):
    model: str
    requested: str
    note: str | None
    n_sites: int
    tx_um: float
    ty_um: float
    sx_ppm: float
    sy_ppm: float
    ox_urad: float
    oy_urad: float
    kx_um_per_mm2: float
    ky_um_per_mm2: float
    rotation_urad: float
    nonorthogonality_urad: float
    mean_x_um: float
    mean_y_um: float
    sigma_x_um: float
    sigma_y_um: float
    m3s_x_um: float
    m3s_y_um: float
    max_residual_um: float
    max_residual_at_mm: tuple[float, float]
    leverage: float | None = Field(
        default=None,
        description="Largest leverage of the fitted model over the product's check points: "
        "the model's variance there is at most this times the residual variance (fit guard).",
    )
    frame: Literal["panel"] = "panel"


class MeasurementRead(BaseModel):
    id: str
    panel: str
    layer: int
    side: str
    tool: str
    measured_at: datetime
    received_at: datetime
    superseded: str | None = Field(
        default=None, description="Id of the earlier measurement this one supersedes."
    )
    fit: FitRead
    state: PanelRead


class ImportRead(BaseModel):
    file: str
    rows: int
    measurements: int
    panels: int
    superseded: int
