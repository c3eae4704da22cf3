"""What drives FTB: tool fingerprints, shares, drift, lots and site vectors (engineers,
supervisors, admins). Every table answers as JSON, CSV or Parquet (``format``); unknown query
parameters are refused with a 422 that names them."""

from __future__ import annotations

from datetime import datetime
from typing import Annotated, Literal

from fastapi import APIRouter, Depends, Path, Response
from fastapi import Query as QueryParam
from pydantic import BaseModel

from app.api.deps import Analyse, DbDep
from app.api.problems import PROBLEM_RESPONSES
from app.errors import FieldError, InvalidInput
from app.schemas.analysis import (
    AnalysisFilter,
    DriftReport,
    DriftSettings,
    FingerprintReport,
    LotReport,
    ShareReport,
    SiteVectors,
    TrendReport,
)
from app.services import analysis_drift, analysis_ftb, analysis_lots, analysis_tools
from app.views.analysis import tables, to_csv, to_parquet

router = APIRouter(prefix="/api/v1/analysis", tags=["analysis"], responses=PROBLEM_RESPONSES)

TABLE_RESPONSES: dict[int | str, dict[str, object]] = {
    200: {"content": {"text/csv": {}, "application/vnd.apache.parquet": {}}}}
Format = Literal["json", "csv", "parquet"]


def _filters(
    product: str,
    exposure_tool: str | None = None,
    side: Literal["A", "B"] | None = None,
    layer: Annotated[int | None, QueryParam(ge=1, le=64)] = None,
    lot: str | None = None,
    start: Annotated[datetime | None, QueryParam(alias="from")] = None,
    end: Annotated[datetime | None, QueryParam(alias="to")] = None,
) -> AnalysisFilter:
    return AnalysisFilter(
        product=product,
        exposure_tool=exposure_tool,
        side=side,
        layer=layer,
        lot=lot,
        start=start,
        end=end,
    )


Filters = Annotated[AnalysisFilter, Depends(_filters)]


def _answer(report: BaseModel, fmt: Format, table: str | None, name: str) -> BaseModel | Response:
    if fmt == "json":
        return report
    available = tables(report)
    chosen = table or next(iter(available))
    if chosen not in available:
        raise InvalidInput(f"unknown table '{chosen}'; one of {', '.join(available)}",
                           [FieldError("unknown table", column="table")])
    rows = available[chosen]
    caption = getattr(report, "note", None)
    if fmt == "csv":
        return Response(to_csv(rows, caption=caption), media_type="text/csv; charset=utf-8",
                        headers={"Content-Disposition":
                                 f'attachment; filename="{name}-{chosen}.csv"'})
    return Response(to_parquet(rows), media_type="application/vnd.apache.parquet",
                    headers={"Content-Disposition":
                             f'attachment; filename="{name}-{chosen}.parquet"'})


@router.get("/fingerprints", response_model=FingerprintReport, responses=TABLE_RESPONSES)
def fingerprints(
    db: DbDep, _: Analyse, f: Filters, by_layer: bool = True,
    confidence: Annotated[float, QueryParam(ge=0.5, lt=1.0)] = 0.95,
    format: Format = "json", table: str | None = None,
) -> BaseModel | Response:
    """Mean terms per exposure tool, side (and layer) in the tool's own frame, with t intervals,
    against the rest of the fleet; and what each tool adds to FTB (tables: fingerprints,
    what_if)."""
    report = analysis_tools.tool_fingerprints(db=db, filters=f, by_layer=by_layer,
                                              confidence=confidence)
    return _answer(report, format, table, "fingerprints")


@router.get("/shares", response_model=ShareReport, responses=TABLE_RESPONSES)
def shares(db: DbDep, _: Analyse, f: Filters, format: Format = "json",
           table: str | None = None) -> BaseModel | Response:
    """Each layer and side's, tool's and lot's share of the mean FTB at the worst check point, and
    the variance components (tables: layer_side, tool, lot_tool, components)."""
    return _answer(analysis_ftb.ftb_shares(db=db, filters=f), format, table, "shares")


@router.get("/drift", response_model=DriftReport, responses=TABLE_RESPONSES)
def drift(
    db: DbDep, _: Analyse, f: Filters,
    lam: Annotated[float, QueryParam(gt=0.0, le=1.0)] = 0.2,
    k: Annotated[float, QueryParam(gt=0.0, le=6.0)] = 3.0,
    baseline_days: Annotated[float, QueryParam(gt=0.0, le=365.0)] = 7.0,
    baseline_end: datetime | None = None, all_charts: bool = False,
    format: Format = "json", table: str | None = None,
) -> BaseModel | Response:
    """EWMA charts and Western Electric rules per tool, side and term in the tool's frame; alarms
    with the estimated change start (tables: alarms, points)."""
    settings = DriftSettings(lam=lam, k=k, baseline_days=baseline_days, baseline_end=baseline_end)
    report = analysis_drift.tool_drift(db=db, filters=f, settings=settings,
                                       all_charts=all_charts)
    return _answer(report, format, table, "drift")


@router.get("/lots", response_model=LotReport, responses=TABLE_RESPONSES)
def lots(db: DbDep, _: Analyse, f: Filters, format: Format = "json",
         table: str | None = None) -> BaseModel | Response:
    """Per lot: panels by risk level, FTB distribution, forecast share within limit."""
    return _answer(analysis_lots.lot_summary(db=db, filters=f), format, table, "lots")


@router.get("/trend", response_model=TrendReport, responses=TABLE_RESPONSES)
def trend(db: DbDep, _: Analyse, f: Filters, period: Literal["day", "week"] = "day",
          format: Format = "json", table: str | None = None) -> BaseModel | Response:
    """The lot figures for the whole product, by day or ISO week of each panel's latest run."""
    report = analysis_lots.product_trend(db=db, filters=f, period=period)
    return _answer(report, format, table, "trend")


@router.get("/vectors/{serial}/{side}/{layer}", response_model=SiteVectors)
def vectors(serial: str, side: Literal["A", "B"], layer: Annotated[int, Path(ge=1, le=64)],
            db: DbDep, _: Analyse) -> SiteVectors:
    """Site vectors of one panel, side and layer, raw and residual, for vector maps."""
    return analysis_lots.site_vectors(db=db, panel=serial, side=side, layer=layer)
