from __future__ import annotations

from datetime import datetime
from typing import Annotated, Final, Literal

from pydantic import AfterValidator, BaseModel, ConfigDict, Field, model_validator

from app.overlay.resistance import RHO_COPPER_20C
from app.schemas.figures import PointIn, PointPairOut
from app.schemas.text import Identifier, single_line

PANEL_MIN_MM: Final = 20.0
PANEL_MAX_MM: Final = 2000.0


class ViaLayer(BaseModel):
    """Via and pad diameters of one layer whose vias differ from the product's usual pair."""

    model_config = ConfigDict(extra="forbid", allow_inf_nan=False)

    layer: int = Field(ge=1, le=40, description="Layer k: its vias land on layer k-1's pads.")
    via_diameter_um: float = Field(gt=0, le=1000)
    pad_diameter_um: float = Field(gt=0, le=2000)

    @model_validator(mode="after")
    def _check(self) -> ViaLayer:
        _pad_over_via(self.via_diameter_um, self.pad_diameter_um)
        return self


def _pad_over_via(via: float, pad: float) -> None:
    if pad <= via:
        raise ValueError(
            f"pad_diameter_um ({pad:g}) must be larger than via_diameter_um ({via:g}): the "
            "capture margin is (pad - via) / 2"
        )


class Vias(BaseModel):
    """Microvias and their landing pads: the capture margin m = (D_pad - D_via) / 2 judges each
    layer's L2L offset, and the copper figures give the stacked-via extra resistance."""

    model_config = ConfigDict(extra="forbid")

    via_diameter_um: float = Field(gt=0, le=1000, description="Usual via diameter (bottom).")
    pad_diameter_um: float = Field(gt=0, le=2000, description="Usual landing pad diameter.")
    layers: list[ViaLayer] = Field(
        default_factory=list, max_length=40, description="Layers whose pair differs."
    )
    copper_thickness_um: float | None = Field(
        default=None, gt=0, le=200,
        description="Pad copper thickness; without it no stacked-via resistance figure.",
    )
    pad_width_um: float | None = Field(
        default=None, gt=0, le=2000,
        description="Width of copper the lateral current crosses; the pad diameter if unset.",
    )
    via_depth_um: float | None = Field(
        default=None, gt=0, le=500,
        description="Via depth (dielectric thickness); gives the chain's own resistance, so "
        "that the extra resistance can be stated as a share of it.",
    )
    resistivity_ohm_m: float = Field(
        default=RHO_COPPER_20C,
        gt=0,
        le=1e-6,
        description="Copper at 20 C (OpenStax University Physics vol. 2); plated copper runs "
        "somewhat higher.",
    )

    @model_validator(mode="after")
    def _check(self) -> Vias:
        _pad_over_via(self.via_diameter_um, self.pad_diameter_um)
        seen = [v.layer for v in self.layers]
        twice = sorted({k for k in seen if seen.count(k) > 1})
        if twice:
            raise ValueError(f"layers lists layer {twice[0]} more than once")
        return self


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
    check_points_mm: list[PointIn] | None = Field(
        default=None,
        min_length=1,
        max_length=400,
        description="Points where FTB is evaluated; default a 5 x 5 grid over the central 90 %.",
        examples=[[[-229.5, -231.75], [0.0, 0.0], [229.5, 231.75]]],
    )
    model_terms: Literal[6, 8] = Field(default=6, description="Terms each layer's fit asks "
                                       "for: 6 (Tx Ty Sx Sy Ox Oy) or 8 (adds Kx Ky).")
    p_watch: float = Field(default=0.05, gt=0, lt=1, description="A panel is watched from this "
                           "P(final over limit) (or a via miss probability) on.")
    p_at_risk: float = Field(default=0.50, gt=0, lt=1, description="A panel is at risk (and "
                             "held) from this P(final over limit) on. For a forecast close "
                             "to the exact posterior, about this share of the held panels or "
                             "more really fail (docs/forecast.md).")
    vias: Vias | None = Field(
        default=None,
        description="Via and pad diameters; without them each layer's L2L is judged against "
        "l2l_limit_um alone.",
    )
    p_watch_leave: float = Field(
        default=0.02, gt=0, lt=1,
        description="A watched panel leaves watch only when P(final over limit) falls below "
        "this (hysteresis); at most p_watch.",
    )
    p_at_risk_leave: float = Field(
        default=0.25, gt=0, lt=1,
        description="An at-risk panel leaves at_risk only when P(final over limit) falls "
        "below this (hysteresis); at most p_at_risk.",
    )

    @model_validator(mode="after")
    def _check(self) -> ProductCreate:
        if self.p_watch > self.p_at_risk:
            raise ValueError("p_watch must not exceed p_at_risk")
        for i, v in enumerate(self.vias.layers if self.vias else []):
            if v.layer > self.layers_per_side:
                raise ValueError(
                    f"vias.layers[{i}].layer is {v.layer}, beyond layers_per_side "
                    f"({self.layers_per_side})"
                )
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
    check_points_mm: list[PointPairOut] = Field(
        description="Check points as [x_mm, y_mm] pairs, panel frame (as the product was "
        "created).")
    p_watch: float
    p_at_risk: float
    vias: Vias | None
    p_watch_leave: float
    p_at_risk_leave: float
    created_at: datetime


class ProductList(BaseModel):
    items: list[ProductRead]
