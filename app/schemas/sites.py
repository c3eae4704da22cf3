"""Measured and residual site vectors of the measurements in force, for the vector maps."""

from __future__ import annotations

from datetime import datetime
from typing import Literal

from pydantic import BaseModel, Field


class SiteVector(BaseModel):
    x_mm: float
    y_mm: float
    dx_um: float
    dy_um: float
    residual_dx_um: float = Field(description="Measured minus the layer's fitted model here.")
    residual_dy_um: float


class LayerSitesRead(BaseModel):
    side: Literal["A", "B"]
    layer: int
    measurement_id: str
    exposure_tool: str
    measured_at: datetime
    sites: list[SiteVector]


class PanelSitesRead(BaseModel):
    serial: str
    frame: Literal["panel"] = "panel"
    layers: list[LayerSitesRead]
