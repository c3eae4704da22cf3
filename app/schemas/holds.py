from __future__ import annotations

from datetime import datetime
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

from app.schemas import codes
from app.schemas.figures import LayersReached, Probability, Um, UmBand
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
    """Release, scrap or rework. Rework names the layer and side that are stripped and built
    again: that layer's measurement in force is set aside (superseded by the rework), the
    panel's FTB, forecast and risk are recomputed without it (the layer counts as still to come),
    and the layer's next measurement takes its place through the normal upload."""

    model_config = ConfigDict(extra="forbid")

    action: Literal["release", "scrap", "rework"] = Field(
        **codes.explained("What is decided for the held panel.", codes.DISPOSITIONS))
    layer: int | None = Field(default=None, ge=1, le=40,
                              description="Rework only, required: the layer reworked.")
    side: Literal["A", "B"] | None = Field(default=None,
                                           description="Rework only, required: its side.")
    note: Note = Field(description="Required: why, and on whose authority under the fab's "
                       "quality procedure.")

    @model_validator(mode="after")
    def _rework_names_its_layer(self) -> DispositionCreate:
        named = self.layer is not None or self.side is not None
        if self.action == "rework" and (self.layer is None or self.side is None):
            raise ValueError("rework needs the layer and the side reworked ('layer', 'side')")
        if self.action != "rework" and named:
            raise ValueError(f"'layer' and 'side' are for rework only, not {self.action}")
        return self


class ReworkRead(BaseModel):
    side: Literal["A", "B"]
    layer: int
    set_aside_measurement: str = Field(description="The measurement superseded by the rework; "
                                       "the layer's next measurement takes its place.")


class HoldRead(BaseModel):
    id: str
    panel: str
    lot: str
    product: str
    state: Literal["open", "closed"] = Field(
        **codes.explained("The hold's state (the panel's is its status).", codes.HOLD_STATES))
    kind: Literal["automatic", "manual"] = Field(
        **codes.explained("Who put the hold on.", codes.HOLD_KINDS))
    rule: str = Field(**codes.described(  # type: ignore[call-overload]
        "The rule that put the hold on.", codes.HOLD_RULES))
    risk: str = Field(**codes.described(  # type: ignore[call-overload]
        "The panel's risk level now.", codes.RISK_LEVELS))
    severity: int = Field(**codes.described(  # type: ignore[call-overload]
        "Rank in the hold list (from the risk level when held); higher first.",
        codes.SEVERITIES))
    layers_reached: LayersReached
    ftb_current_um: Um = Field(description="Current FTB: the worst FTB over the check points "
                               "from the layers measured so far.")
    ftb_limit_um: Um = Field(description="The product's FTB limit.")
    ftb_final_forecast_um: Um | None = Field(
        description="Forecast final FTB, once every layer is on (null: no forecast).")
    ftb_final_band_um: UmBand | None = Field(description="95 % band of the final FTB.")
    p_final_over_limit: Probability | None = Field(
        description="Probability that the final FTB ends over the FTB limit.")
    reason: str = Field(description="Why the panel is held, in plain words with the figures.")
    held_since: datetime
    held_by: str = Field(description="'stackledger (automatic)' for a rule's hold, else the "
                         "label of the key (or the CLI's --by) that put it on.")
    disposition: Literal["release", "scrap", "rework"] | None = Field(
        default=None, **codes.explained("What was decided (closed holds).", codes.DISPOSITIONS))
    disposition_note: str | None = Field(default=None, description="Why, as recorded.")
    disposition_at: datetime | None = Field(default=None, description="When it was recorded.")
    disposition_by: str | None = Field(default=None, description="Who recorded it.")
    rework: ReworkRead | None = None


class HoldList(BaseModel):
    caution: str = CAUTION
    holds: list[HoldRead]
    next_cursor: str | None = Field(default=None,
                                    description="Pass as ?cursor= to get the next page.")
