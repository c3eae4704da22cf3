"""Lots and products: FTB distribution, risk levels and the forecast share within limit, per
lot and per day or week; and the site vectors of one panel, layer and side for vector maps.

Everything here reads the stored panel states (FTB now at the worst check point, forecast
P(final over limit), risk level), which every accepted measurement rewrites; nothing is
recomputed. A window selects the panels with a run measured in it; a panel's period is the day
(or ISO week, UTC) of its latest run.
"""

from __future__ import annotations

from collections import defaultdict
from typing import Any, Literal, get_args

import numpy as np
from sqlalchemy import func, select

from app.db import Database
from app.errors import FieldError, NotFound
from app.overlay.model import evaluate
from app.schemas import codes
from app.schemas.analysis import (
    AnalysisFilter,
    LotReport,
    LotRow,
    PeriodRow,
    SiteVector,
    SiteVectors,
    TrendReport,
)
from app.schemas.panels import RiskLevel
from app.services.analysis_data import check_window, product_info
from app.store import sitepack
from app.store.tables import Fit, Lot, Measurement, Panel, PanelEstimate, SiteSet


def _distribution(states: list[Any]) -> dict[str, Any]:
    """Counts by risk level, FTB percentiles and the forecast share within limit."""
    by_risk: dict[str, int] = dict.fromkeys(get_args(RiskLevel), 0)
    for s in states:
        by_risk[s.risk] = by_risk.get(s.risk, 0) + 1
    ftb = np.array([s.ftb_worst_um for s in states], dtype=np.float64)
    p = np.array([s.p_exceed for s in states if s.p_exceed is not None], dtype=np.float64)
    some = ftb.size > 0

    def pct(q: float) -> float | None:
        return float(np.percentile(ftb, q)) if some else None

    return {
        "panels": len(states), "by_risk": by_risk,
        "ftb_mean_um": float(ftb.mean()) if some else None,
        "ftb_sigma_um": float(ftb.std(ddof=1)) if ftb.size > 1 else None,
        "ftb_p50_um": pct(50), "ftb_p90_um": pct(90), "ftb_p99_um": pct(99),
        "forecast_panels": int(p.size),
        "forecast_within_limit": float(np.mean(1.0 - p)) if p.size else None,
    }


def _states(db: Database, filters: AnalysisFilter) -> tuple[Any, list[Any]]:
    """Panel states of the filter's panels, each with its lot and its latest run time."""
    check_window(filters)
    with db.reading() as session:
        info = product_info(session, filters.product)
        last = (select(Measurement.panel, func.max(Measurement.measured_at).label("last_at"))
                .join(Panel, Panel.serial == Measurement.panel)
                .join(Lot, Lot.id == Panel.lot_id)
                .where(Measurement.superseded_by.is_(None)))
        window = filters.start is not None or filters.end is not None
        # As analysis_data._runs_query: with a window, read it off the time index.
        last = last.where((Panel.product_id + 0 if window else Panel.product_id) == info.id)
        if filters.start is not None:
            last = last.where(Measurement.measured_at >= filters.start)
        if filters.end is not None:
            last = last.where(Measurement.measured_at < filters.end)
        for column, value in (
            (Measurement.exposure_tool, filters.exposure_tool),
            (Measurement.side, filters.side),
            (Measurement.layer, filters.layer),
            (Lot.code, filters.lot),
        ):
            if value is not None:
                last = last.where(column == value)
        sub = last.group_by(Measurement.panel).subquery()
        rows = session.execute(
            select(PanelEstimate.panel, PanelEstimate.risk, PanelEstimate.ftb_worst_um,
                   PanelEstimate.p_exceed, Lot.code.label("lot"), sub.c.last_at)
            .join(sub, sub.c.panel == PanelEstimate.panel)
            .join(Panel, Panel.serial == PanelEstimate.panel)
            .join(Lot, Lot.id == Panel.lot_id)
        ).all()
    return info, list(rows)


def lot_summary(*, db: Database, filters: AnalysisFilter) -> LotReport:
    """Per lot: panels by risk level, FTB distribution, forecast share within limit."""
    info, rows = _states(db, filters)
    groups: dict[str, list[Any]] = defaultdict(list)
    for r in rows:
        groups[r.lot].append(r)
    lots = [LotRow(lot=lot, **_distribution(states)) for lot, states in sorted(groups.items())]
    return LotReport(product=info.code, ftb_limit_um=info.ftb_limit_um, lots=lots)


def product_trend(*, db: Database, filters: AnalysisFilter,
                  period: Literal["day", "week"] = "day") -> TrendReport:
    """The same figures per day or ISO week of each panel's latest run."""
    info, rows = _states(db, filters)
    groups: dict[str, list[Any]] = defaultdict(list)
    for r in rows:
        if period == "day":
            key = r.last_at.date().isoformat()
        else:
            year, week, _ = r.last_at.isocalendar()
            key = f"{year}-W{week:02d}"
        groups[key].append(r)
    out = [PeriodRow(period=key, **_distribution(states)) for key, states in sorted(groups.items())]
    return TrendReport(product=info.code, period=period, ftb_limit_um=info.ftb_limit_um, rows=out)


def site_vectors(*, db: Database, panel: str, side: str, layer: int) -> SiteVectors:
    """Raw and residual site vectors of the measurement in force (panel frame, plus as posted);
    residual = site vector minus the fit's model at the site."""
    with db.reading() as session:
        found = session.execute(
            select(Measurement, Fit)
            .join(Fit, (Fit.panel == Measurement.panel) & (Fit.measurement_id == Measurement.id))
            .where(Measurement.panel == panel, Measurement.side == side,
                   Measurement.layer == layer, Measurement.superseded_by.is_(None))
        ).first()
        if found is None:
            raise NotFound(f"no measurement in force for panel '{panel}', side {side}, "
                           f"layer {layer}", [FieldError("not measured", column="layer")])
        m, fit = found
        pack = session.get_one(SiteSet, (panel, m.id))
        posted, frame = sitepack.unpack(pack.posted), sitepack.unpack(pack.panel_frame)
        terms = np.array([fit.tx, fit.ty, fit.sx, fit.sy, fit.ox, fit.oy, fit.kx, fit.ky])
        mdx, mdy = evaluate(terms, frame[:, 0], frame[:, 1])
        vectors = [
            SiteVector(seq=i, x_mm_posted=float(p[0]), y_mm_posted=float(p[1]),
                       dx_um_posted=float(p[2]), dy_um_posted=float(p[3]), x_mm=float(f[0]),
                       y_mm=float(f[1]), dx_um=float(f[2]), dy_um=float(f[3]),
                       model_dx_um=float(a), model_dy_um=float(b),
                       residual_dx_um=float(f[2] - a), residual_dy_um=float(f[3] - b))
            for i, (p, f, a, b) in enumerate(zip(posted, frame, mdx, mdy, strict=True))
        ]
        return SiteVectors(panel=panel, side=m.side, layer=m.layer,
                           exposure_tool=m.exposure_tool, frame=m.frame, measured_at=m.measured_at,
                           model=codes.FIT_MODEL_NAMES[fit.model], sites=vectors)
