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
    mean: float | None = Field(description="Mean of the term, raw units (um; um/mm, x 1000 for "
                               "ppm or urad; um/mm^2).")
    half_width: float | None = Field(description="Half-width of its 95 % t interval, same "
                                     "units; null with too few runs.")


class FingerprintRow(BaseModel):
    exposure_tool: str
    side: Side
    layer: int | None = Field(description="null: all layers of that side together.")
    count: int = Field(description="Runs of this exposure tool.")
    rest_count: int = Field(description="Runs of the rest of the fleet on the same side.")
    terms_facing_side: list[TermFigure] = Field(
        description="The tool's mean terms in its own (facing-side) frame.")
    rest_facing_side: list[TermFigure] = Field(description="The rest of the fleet's, same frame.")
    difference_facing_side: list[TermFigure] = Field(
        description="The tool's less the rest's: what is this tool's own.")


class ToolWhatIf(BaseModel):
    """FTB spread at the worst check point with and without one exposure tool's bias."""

    exposure_tool: str
    runs: int
    ftb_3sigma_with_um: float = Field(description="|mean| + 3 sigma of the FTB at the worst "
                                      "check point, over the panels, as they are.")
    ftb_3sigma_without_um: float = Field(description="The same with this tool's mean bias "
                                         "taken out of its runs.")
    adds_um: float = Field(description="with - without: what the tool's bias adds.")


class FingerprintReport(BaseModel):
    product: str
    confidence: float
    panels: int
    rows: list[FingerprintRow]
    what_if: list[ToolWhatIf]
    worst_point_mm: PointOut | None = Field(description="The check point of the worst mean "
                                            "FTB, where the what-if is judged.")
    note: str = CAUTION


class Contribution(BaseModel):
    group: str = Field(description="What the share is of: 'L3 A' (layer 3 side A), an exposure "
                       "tool, ...")
    runs: int
    dx_um: float = Field(description="Its part of the mean FTB vector at the worst check point.")
    dy_um: float
    share: float = Field(description="Its share of the mean FTB there (the shares add up to 1; "
                         "a negative share pulls the other way).")


class LotToolShares(BaseModel):
    lot: str
    panels: int
    mean_ftb_um: UmPair
    by_exposure_tool: list[Contribution]


class VarianceComponent(BaseModel):
    source: Literal["exposure tool", "lot", "panel within lot", "layer scatter"]
    variance_um2: float = Field(description="Variance of the FTB at the worst check point "
                                "from this source, um^2.")
    share: float = Field(description="Its share of the total variance.")
    truncated: bool = Field(description="The estimate came out negative and is shown as 0.")
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
    panels: int = Field(description="Panels in the subgroup (one lot, one layer and side).")
    at: datetime
    mean_facing_side: float = Field(description="Subgroup mean of the term, raw units, in the "
                                    "tool's own (facing-side) frame.")
    ewma: float = Field(description="The EWMA after this point, same units.")
    lower: float = Field(description="Lower control limit at this point.")
    upper: float = Field(description="Upper control limit at this point.")
    rules: list[str] = Field(description="Run rules that fired at this point (NIST/SEMATECH "
                             "e-Handbook 6.3.2), e.g. '1 beyond 3 sigma'.")


class DriftAlarm(BaseModel):
    exposure_tool: str
    side: Side
    term: TermName
    size_facing_side: float = Field(description="The EWMA's distance from the centre at the "
                                    "last point, raw units, tool's own frame.")
    strength: float = Field(description="The largest |EWMA - centre| over the limit half-width "
                            "(above 1: beyond the limits).")
    first_signal: datetime
    change_start: datetime = Field(description="Estimated start of the change.")
    change_kind: Literal["step", "ramp"] = Field(description="step: a shift at change_start; "
                                                 "ramp: a drift from it.")
    change_rate: float = Field(description="The step's size, or the ramp's slope per day, raw "
                               "units.")
    rules: list[str] = Field(description="Run rules that fired at or after the change start.")


class DriftChart(BaseModel):
    exposure_tool: str
    side: Side
    term: TermName
    centre: float = Field(description="Centre line from the baseline, raw units.")
    sigma_between: float = Field(description="Spread of subgroup means between subgroups.")
    sigma_within: float = Field(description="Spread within a subgroup.")
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
    ftb_mean_um: float | None = Field(description="Mean current FTB of the measured panels.")
    ftb_sigma_um: float | None
    ftb_p50_um: float | None = Field(description="Median current FTB (p90, p99 alike).")
    ftb_p90_um: float | None
    ftb_p99_um: float | None
    forecast_panels: int = Field(description="Panels with a forecast.")
    forecast_within_limit: float | None = Field(
        description="Forecast yield: the mean of 1 - P(final over limit) over those panels.")


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
