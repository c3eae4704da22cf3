"""Typed, versioned shapes of the JSON that the running estimate keeps (``panel_states``).

A JSON column read back as a plain dict invites ``.get(key, 0.0)`` defaults that hide a missing
figure. These models are the one definition of what is stored: the column type validates on the
way in and parses on the way out, so a reader gets attributes, never dict lookups. Each model
carries ``version``; a later change of shape adds a version and a migration that rewrites rows.

Units are the stored ones (um, mm); conversion for reports happens in the schemas and views.
"""

from __future__ import annotations

from typing import Any, Literal

from pydantic import BaseModel, ConfigDict, TypeAdapter
from sqlalchemy import JSON, TypeDecorator
from sqlalchemy.engine import Dialect

from app.overlay.capture import InterfaceCapture
from app.overlay.resistance import StackedVia


class _Stored(BaseModel):
    model_config = ConfigDict(frozen=True, extra="forbid")


class StoredPoint(_Stored):
    """FTB at one check point (panel frame)."""

    x_mm: float
    y_mm: float
    dx_um: float
    dy_um: float
    length_um: float


StoredPoints = list[StoredPoint]
points_adapter: TypeAdapter[StoredPoints] = TypeAdapter(StoredPoints)


class SidesLayers(_Stored):
    """Per side, a figure per layer number."""

    A: dict[int, float]
    B: dict[int, float]


class StoredStack(_Stored):
    """What the stack view shows (rows written before a figure was dropped may still hold it:
    it is ignored on reading). ``cumulative_worst_um[k-1]`` is the worst FTB over layers
    1..k of both sides (dense by layer number, so out-of-order arrivals read right)."""

    model_config = ConfigDict(frozen=True, extra="ignore")

    version: Literal[1] = 1
    l2l_worst_um: SidesLayers
    cumulative_worst_um: list[float]
    residual_sigma_um: tuple[float, float]
    linear_worst_case_um: float
    rss_um: float
    #: Each interface's L2L and capture figures (``app.overlay.capture``; an infinite contact
    #: ratio, a via off its pad, is kept as None).
    capture: list[InterfaceCapture] = []
    #: The stacked-via chain's extra resistance: a figure, never a rule.
    stacked_via: StackedVia | None = None


class RemainingLayers(_Stored):
    A: list[int]
    B: list[int]


class StoredForecast(_Stored):
    """The forecast of the final FTB at the last layer."""

    version: Literal[1] = 1
    final_worst_um: float
    band_um: tuple[float, float]
    p_exceed: float
    #: Monte Carlo standard error of p_exceed, the samples drawn (more near a threshold), and
    #: whether the level was decided at the stated confidence.
    p_exceed_stderr: float | None = None
    samples: int | None = None
    decided: bool | None = None
    #: The exposure tool whose effect was carried into the remaining layers, if any.
    tool: str | None = None
    remaining: RemainingLayers
    method: str
    #: Final FTB terms (panel frame, raw units) and their sd: what a calibration check compares
    #: with a panel's true final terms.
    final_terms: list[float] = []
    final_terms_sd: list[float] = []


class Typed(TypeDecorator[Any]):
    """A JSON column holding a pydantic model (or anything a TypeAdapter handles)."""

    impl = JSON(none_as_null=True)
    cache_ok = True

    def __init__(self, shape: type[BaseModel] | TypeAdapter[Any]) -> None:
        super().__init__()
        self.adapter = shape if isinstance(shape, TypeAdapter) else TypeAdapter(shape)

    def process_bind_param(self, value: Any, dialect: Dialect) -> Any:
        if value is None:
            return None
        return self.adapter.dump_python(self.adapter.validate_python(value), mode="json")

    def process_result_value(self, value: Any, dialect: Dialect) -> Any:
        if value is None:
            return None
        return self.adapter.validate_python(value)
