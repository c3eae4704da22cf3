from __future__ import annotations

from datetime import datetime
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field

from app.schemas import codes
from app.schemas.figures import PointOut, Ppm, Um, Urad
from app.schemas.panels import FitModel, PanelRead
from app.services.batch import LAYER_BOUND

# The schema gives shape and types only. What a value must be (side A or B, a time with a zone,
# a finite number on the panel, ...) is checked by the one catalogue that CSV imports go
# through too (app.services.checks), so the same bad value gets the same message both ways;
# enums and limits below are documentation of those checks.


class SiteIn(BaseModel):
    model_config = ConfigDict(extra="forbid")

    x_mm: float = Field(description="Site x about the panel centre, mm.")
    y_mm: float = Field(description="Site y about the panel centre, mm.")
    dx_um: float = Field(description="Overlay in x (measured minus reference), um.")
    dy_um: float = Field(description="Overlay in y (measured minus reference), um.")


def _text(description: str, required: bool = True) -> object:
    extra = {"minLength": 1, "maxLength": 64} if required else {"maxLength": 64}
    return Field(default=... if required else None, description=description,
                 json_schema_extra=extra)


class MeasurementCreate(BaseModel):
    model_config = ConfigDict(extra="forbid")

    panel: str = _text("Panel serial.")  # type: ignore[assignment]
    # The bound is the reader's (a number that cannot be any layer); the product's own range
    # is the catalogue's check.
    layer: int = Field(ge=-LAYER_BOUND, le=LAYER_BOUND,
                       description="Build-up layer, 1..layers_per_side of the product.")
    side: str = Field(**codes.described("Side of the panel.", codes.SIDES))
    frame: str = Field(default="facing_side", **codes.described(
        "Frame of the site coordinates and vectors.", codes.FRAMES))
    exposure_tool: str = _text(  # type: ignore[assignment]
        "Exposure tool that printed the layer (not the metrology tool).")
    measured_at: str = Field(description="ISO 8601 time with a time zone.",
                             json_schema_extra={"format": "date-time"})
    metrology_tool: str | None = _text("Metrology tool that measured it.",  # type: ignore[assignment]
                                       required=False)
    recipe: str | None = _text("Exposure recipe.", required=False)  # type: ignore[assignment]
    artwork: str | None = _text("Reticle or artwork id.", required=False)  # type: ignore[assignment]
    shift: str | None = _text("Operator shift.", required=False)  # type: ignore[assignment]
    sites: list[SiteIn] = Field(description="1 to 2,000 sites.")


class FitRead(BaseModel):
    model: FitModel = Field(**codes.explained(  # type: ignore[call-overload]
        "The terms fitted.", codes.FIT_MODELS))
    requested: FitModel = Field(description="The terms the product asks for; more than "
                                "'model' when the sites could not carry them (see 'note').")
    note: str | None = Field(description="Why fewer terms were fitted than requested.")
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
    mean_plus_3sigma_x_um: Um = Field(description="|mean| + 3 sigma of the x residuals.")
    mean_plus_3sigma_y_um: Um = Field(description="|mean| + 3 sigma of the y residuals.")
    largest_residual_um: Um = Field(description="The largest residual vector's length.")
    largest_residual_at_mm: PointOut = Field(description="The site of the largest residual.")
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
    exposure_tool: str
    measured_at: datetime
    received_at: datetime
    superseded: str | None = Field(
        default=None, description="Id of the earlier measurement this one supersedes."
    )
    fit: FitRead
    panel_after: PanelRead = Field(description="The panel's estimate with this measurement in.")


class ImportRead(BaseModel):
    file: str
    rows: int
    measurements: int
    panels: int
    superseded: int
