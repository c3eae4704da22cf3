"""Requests and answers of the FTB analysis: fingerprints, shares, drift, lots, site vectors.

Terms are in raw units (um, um/mm, um/mm^2) in ``TERM_NAMES`` order; figures in the exposure
tool's own frame (the facing-side frame, docs/glossary.md) say so in their name
(``*_facing_side``). A figure that cannot be computed (too few runs for an interval) is null.
"""

from __future__ import annotations

from datetime import datetime
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field

from app.schemas.figures import PointOut, UmPair
from app.schemas.panels import RiskLevel

Side = Literal["A", "B"]
TermName = Literal["Tx", "Ty", "Sx", "Sy", "Ox", "Oy", "Kx", "Ky"]

CAUTION = ("Figures support the fab's own quality procedures; decisions on product disposition "
           "rest with its qualified engineers.")


class AnalysisFilter(BaseModel):
    """Which layer runs an analysis reads: one product, optionally narrowed."""

    model_config = ConfigDict(extra="forbid", frozen=True)

    product: str
    exposure_tool: str | None = None
    side: Side | None = None
    layer: int | None = Field(default=None, ge=1, le=64)
    lot: str | None = None
    start: datetime | None = Field(default=None, description="measured at or after (from)")
    end: datetime | None = Field(default=None, description="measured before (to)")


class TermFigure(BaseModel):
    """A term's mean with its interval half-width (null when too few runs)."""

    term: TermName
    mean: float | None
    half_width: float | None


class FingerprintRow(BaseModel):
    exposure_tool: str
    side: Side
    layer: int | None  # None: all layers of that side together
    count: int
    rest_count: int
    terms_facing_side: list[TermFigure]
    rest_facing_side: list[TermFigure]
    difference_facing_side: list[TermFigure]


class ToolWhatIf(BaseModel):
    """FTB spread at the worst check point with and without one exposure tool's bias."""

    exposure_tool: str
    runs: int
    ftb_3sigma_with_um: float
    ftb_3sigma_without_um: float
    adds_um: float


class FingerprintReport(BaseModel):
    product: str
    confidence: float
    panels: int
    rows: list[FingerprintRow]
    what_if: list[ToolWhatIf]
    worst_point_mm: PointOut | None
    note: str = CAUTION


class Contribution(BaseModel):
    group: str  # "L3 A", "EXP-2", ...
    runs: int
    dx_um: float
    dy_um: float
    share: float


class LotToolShares(BaseModel):
    lot: str
    panels: int
    mean_ftb_um: UmPair
    by_exposure_tool: list[Contribution]


class VarianceComponent(BaseModel):
    source: Literal["exposure tool", "lot", "panel within lot", "layer scatter"]
    variance_um2: float
    share: float
    truncated: bool
    groups: int


class ShareReport(BaseModel):
    product: str
    panels: int
    worst_point_mm: PointOut
    mean_ftb_um: UmPair
    ftb_3sigma_um: float
    by_layer_side: list[Contribution]
    by_exposure_tool: list[Contribution]
    by_lot: list[LotToolShares]
    components: list[VarianceComponent]
    note: str = CAUTION


class DriftSettings(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    lam: float = Field(default=0.2, gt=0.0, le=1.0, description="EWMA weight lambda")
    k: float = Field(default=3.0, gt=0.0, le=6.0, description="limit width in sigmas")
    baseline_days: float = Field(default=7.0, gt=0.0, le=365.0)
    baseline_end: datetime | None = None


class DriftPoint(BaseModel):
    lot: str
    layer: int
    panels: int
    at: datetime
    mean_facing_side: float
    ewma: float
    lower: float
    upper: float
    rules: list[str]


class DriftAlarm(BaseModel):
    exposure_tool: str
    side: Side
    term: TermName
    size_facing_side: float  # the EWMA's distance from the centre at the last point, raw units
    strength: float  # the largest |EWMA - centre| over the limit half-width
    first_signal: datetime
    change_start: datetime
    change_kind: Literal["step", "ramp"]
    change_rate: float  # step size, or slope per day for a ramp (raw units)
    rules: list[str]  # run rules that fired at or after the change start


class DriftChart(BaseModel):
    exposure_tool: str
    side: Side
    term: TermName
    centre: float
    sigma_between: float
    sigma_within: float
    points: list[DriftPoint]


class DriftReport(BaseModel):
    product: str
    settings: DriftSettings
    baseline_end: datetime | None
    alarms: list[DriftAlarm]
    charts: list[DriftChart]
    note: str = CAUTION


class FtbDistribution(BaseModel):
    panels: int
    by_risk: dict[RiskLevel, int] = Field(
        examples=[{"clear": 20, "watch": 3, "at_risk": 1, "over_limit": 0}])
    ftb_mean_um: float | None
    ftb_sigma_um: float | None
    ftb_p50_um: float | None
    ftb_p90_um: float | None
    ftb_p99_um: float | None
    forecast_panels: int
    forecast_within_limit: float | None  # mean of 1 - P(final over limit) over forecast panels


class LotRow(FtbDistribution):
    lot: str


class PeriodRow(FtbDistribution):
    period: str  # "2026-11-29" or "2026-W48"


class LotReport(BaseModel):
    product: str
    ftb_limit_um: float
    lots: list[LotRow]
    note: str = CAUTION


class TrendReport(BaseModel):
    product: str
    period: Literal["day", "week"]
    ftb_limit_um: float
    rows: list[PeriodRow]
    note: str = CAUTION


class SiteVector(BaseModel):
    seq: int
    x_mm_posted: float
    y_mm_posted: float
    dx_um_posted: float
    dy_um_posted: float
    x_mm: float
    y_mm: float
    dx_um: float
    dy_um: float
    model_dx_um: float
    model_dy_um: float
    residual_dx_um: float
    residual_dy_um: float


class SiteVectors(BaseModel):
    panel: str
    side: Side
    layer: int
    exposure_tool: str
    frame: str
    measured_at: datetime
    model: str = Field(description="The terms the layer's fit used: 8_terms, 6_terms or "
                       "2_terms (docs/glossary.md).")
    sites: list[SiteVector]
