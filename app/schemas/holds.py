from __future__ import annotations

from datetime import datetime
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field

from app.schemas.text import Note

CAUTION = (
    "stackledger flags panels from overlay data and forecasts; it does not decide their fate. "
    "Release, scrap and rework are decisions for the fab's own quality procedures and "
    "qualified engineers."
)


class HoldCreate(BaseModel):
    model_config = ConfigDict(extra="forbid")

    reason: Note


class DispositionCreate(BaseModel):
    model_config = ConfigDict(extra="forbid")

    action: Literal["release", "scrap", "rework"]
    note: Note = Field(description="Required: why, and on whose authority under the fab's "
                       "quality procedure.")
    rework_side: Literal["A", "B"] | None = Field(
        default=None, description="Rework only: the side of the layer to redo (default: the "
        "last layer built).")
    rework_layer: int | None = Field(default=None, ge=1, le=64, description="Rework only: the "
                                     "layer to redo; its re-measurement supersedes the old one.")


class HoldRead(BaseModel):
    id: str
    panel: str
    lot: str
    product: str
    state: Literal["open", "closed"]
    kind: Literal["automatic", "manual"]
    rule: str
    risk: str
    severity: int
    layers_reached: dict[str, int]
    ftb_now_um: float
    ftb_limit_um: float = Field(description="The product's FTB limit.")
    forecast_final_um: float | None
    forecast_band_um: tuple[float, float] | None
    p_exceed: float | None
    reason: str
    held_since: datetime
    held_by: str
    disposition: str | None = None
    disposition_note: str | None = None
    disposed_at: datetime | None = None
    disposed_by: str | None = None


class HoldList(BaseModel):
    caution: str = CAUTION
    holds: list[HoldRead]
    next_cursor: str | None = Field(default=None,
                                    description="Pass as ?cursor= to get the next page.")
