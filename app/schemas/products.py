from __future__ import annotations

from datetime import datetime
from typing import Annotated, Final, Literal

from pydantic import AfterValidator, BaseModel, ConfigDict, Field, model_validator

from app.overlay.resistance import RHO_COPPER_20C
from app.schemas.figures import PointIn, PointOut
from app.schemas.text import Identifier, single_line

PANEL_MIN_MM: Final = 20.0
PANEL_MAX_MM: Final = 2000.0


class Connection(BaseModel):
    """A representative routed connection, used to turn FTB into extra resistance."""

    model_config = ConfigDict(extra="forbid", allow_inf_nan=False)

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
    model_config = ConfigDict(extra="forbid", allow_inf_nan=False)

    code: Identifier
    name: Annotated[str, AfterValidator(single_line)] = Field(default="", max_length=200)
    layers_per_side: int = Field(ge=1, le=40)
    flip_axis: Literal["x", "y"]
    # A panel from 20 mm (a coupon) to 2 m a side: beyond either it is a typing error.
    panel_width_mm: float = Field(ge=PANEL_MIN_MM, le=PANEL_MAX_MM)
    panel_height_mm: float = Field(ge=PANEL_MIN_MM, le=PANEL_MAX_MM)
    ftb_limit_um: float = Field(gt=0, le=10_000)
    l2l_limit_um: float = Field(gt=0, le=10_000)
    model_terms: Literal[6, 8] = 6
    check_points_mm: list[PointIn] | None = Field(
        default=None,
        min_length=1,
        max_length=400,
        description="Points where FTB is evaluated; default a 5 x 5 grid over the central 90 %.",
        examples=[[[-229.5, -231.75], [0.0, 0.0], [229.5, 231.75]]],
    )
    p_watch: float = Field(default=0.05, gt=0, lt=1)
    p_at_risk: float = Field(default=0.20, gt=0, lt=1)
    connection: Connection | None = None

    @model_validator(mode="after")
    def _check(self) -> ProductCreate:
        if self.p_watch > self.p_at_risk:
            raise ValueError("p_watch must not exceed p_at_risk")
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
    check_points_mm: list[PointOut]
    p_watch: float
    p_at_risk: float
    connection: Connection | None
    created_at: datetime


class ProductList(BaseModel):
    items: list[ProductRead]
