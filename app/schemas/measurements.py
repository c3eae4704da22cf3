from __future__ import annotations

import math
from datetime import datetime
from typing import Literal

from pydantic import AwareDatetime, BaseModel, ConfigDict, Field, field_validator

from app.schemas.figures import PointOut, Ppm, Um, Urad
from app.schemas.panels import PanelRead
from app.schemas.text import Identifier, Name


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

    panel: Identifier
    layer: int
    side: Literal["A", "B"]
    frame: Literal["tool", "panel"] = "tool"
    tool: Name
    measured_at: AwareDatetime
    sites: list[SiteIn]


class FitRead(BaseModel):
    model: str
    requested: str
    note: str | None
    n_sites: int
    tx_um: Um
    ty_um: Um
    sx_ppm: Ppm
    sy_ppm: Ppm
    ox_urad: Urad
    oy_urad: Urad
    kx_um_per_mm2: float
    ky_um_per_mm2: float
    rotation_urad: Urad
    nonorthogonality_urad: Urad
    mean_x_um: Um
    mean_y_um: Um
    sigma_x_um: Um
    sigma_y_um: Um
    m3s_x_um: Um
    m3s_y_um: Um
    max_residual_um: Um
    max_residual_at_mm: PointOut
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
