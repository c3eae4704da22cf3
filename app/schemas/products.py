from __future__ import annotations

from datetime import datetime
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

from app.overlay.resistance import RHO_COPPER_20C


class Connection(BaseModel):
    """A representative routed connection, used to turn FTB into extra resistance."""

    model_config = ConfigDict(extra="forbid")

    width_um: float = Field(gt=0)
    thickness_um: float = Field(gt=0)
    length_um: float = Field(gt=0)
    resistivity_ohm_m: float = Field(
        default=RHO_COPPER_20C,
        gt=0,
        description="Copper at 20 C (OpenStax University Physics vol. 2); plated copper runs "
        "somewhat higher.",
    )
    resistance_limit_ohm: float = Field(gt=0)


class ProductCreate(BaseModel):
    model_config = ConfigDict(extra="forbid")

    code: str = Field(min_length=1, max_length=64, pattern=r"^[A-Za-z0-9._-]+$")
    name: str = Field(default="", max_length=200)
    layers_per_side: int = Field(ge=1, le=40)
    flip_axis: Literal["x", "y"]
    panel_width_mm: float = Field(gt=0, le=2000)
    panel_height_mm: float = Field(gt=0, le=2000)
    ftb_limit_um: float = Field(gt=0)
    l2l_limit_um: float = Field(gt=0)
    model_terms: Literal[6, 8] = 6
    check_points_mm: list[tuple[float, float]] | None = Field(
        default=None,
        min_length=1,
        max_length=400,
        description="Points where FTB is evaluated; default a 5 x 5 grid over the central 90 %.",
    )
    p_watch: float = Field(default=0.05, gt=0, lt=1)
    p_at_risk: float = Field(default=0.20, gt=0, lt=1)
    p_watch_leave: float = Field(
        default=0.02, gt=0, lt=1,
        description="A watched panel leaves watch only when P(exceed) falls below this "
        "(hysteresis); at most p_watch.",
    )
    p_at_risk_leave: float = Field(
        default=0.10, gt=0, lt=1,
        description="An at-risk panel leaves at_risk only when P(exceed) falls below this "
        "(hysteresis); at most p_at_risk.",
    )
    connection: Connection | None = None

    @model_validator(mode="after")
    def _check(self) -> ProductCreate:
        if self.p_watch > self.p_at_risk:
            raise ValueError("p_watch must not exceed p_at_risk")
        if self.p_watch_leave > self.p_watch:
            raise ValueError("p_watch_leave must not exceed p_watch")
        if self.p_at_risk_leave > self.p_at_risk:
            raise ValueError("p_at_risk_leave must not exceed p_at_risk")
        for i, (x, y) in enumerate(self.check_points_mm or []):
            if abs(x) > self.panel_width_mm / 2 or abs(y) > self.panel_height_mm / 2:
                raise ValueError(f"check_points_mm[{i}] = ({x}, {y}) lies outside the panel")
        return self


class ProductRead(BaseModel):
    code: str
    name: str
    layers_per_side: int
    flip_axis: Literal["x", "y"]
    panel_width_mm: float
    panel_height_mm: float
    ftb_limit_um: float
    l2l_limit_um: float
    model_terms: int
    check_points_mm: list[tuple[float, float]]
    p_watch: float
    p_at_risk: float
    p_watch_leave: float
    p_at_risk_leave: float
    connection: Connection | None
    created_at: datetime
