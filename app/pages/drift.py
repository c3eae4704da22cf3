"""Drift of the exposure tools: the EWMA charts (one per tool, side and term chosen; by default
those that alarmed) and the alarm list, each alarm linked to its chart and to the lots that ran
since its estimated change start."""

from __future__ import annotations

from typing import Annotated, Any
from urllib.parse import urlencode

from fastapi import APIRouter, Query, Request
from fastapi.responses import HTMLResponse

from app.api.deps import DbDep
from app.errors import DomainError
from app.overlay.model import TERM_NAMES
from app.pages.choices import product_choice, side_choice, term_choice
from app.pages.common import User, refused, render, require
from app.schemas.analysis import AnalysisFilter, DriftChart
from app.services import analysis_drift
from app.views.drift_charts import chart_ident, ewma_chart_svg, is_alarm
from app.views.terms import TERM_UNITS
from app.views.tool_views import lots_since_change

router = APIRouter(include_in_schema=False)
Text = Annotated[str, Query(max_length=64)]
#: Charts drawn on one page (each is ~15 KB of SVG); the page says how many more there are.
MOST_CHARTS = 8


@router.get("/analysis/drift", response_class=HTMLResponse)
def drift_page(request: Request, db: DbDep, user: User, product: Text = "",
               exposure_tool: Text = "",
               side: Annotated[str, Query(max_length=8)] = "",
               term: Annotated[str, Query(max_length=2)] = "") -> HTMLResponse:
    try:
        require(user, "analyse")
        codes, chosen = product_choice(db, product)
        picked = {"exposure_tool": exposure_tool.strip() or None,
                  "side": side_choice(side) if side else None, "term": term_choice(term)}
        context: dict[str, Any] = {"products": codes, "product": chosen, "picked": picked,
                                   "terms": TERM_NAMES, "units": TERM_UNITS, "charts": [],
                                   "tools": [], "report": None}
        if chosen is not None:
            # Every chart, so that the choice lists every tool; unless one is asked for, the
            # page draws those that alarmed.
            report = analysis_drift.tool_drift(db=db, filters=AnalysisFilter(product=chosen),
                                               all_charts=True)
            alarmed = {(a.exposure_tool, a.side, a.term) for a in report.alarms}
            wanted = [c for c in report.charts
                      if all(v is None or getattr(c, k) == v for k, v in picked.items())
                      and (any(picked.values()) or (c.exposure_tool, c.side, c.term) in alarmed)]
            context.update(report=report, total=len(wanted),
                           tools=sorted({c.exposure_tool for c in report.charts}),
                           charts=[_drawn(c) for c in wanted[:MOST_CHARTS]])
    except DomainError as exc:
        return refused(request, user, exc)
    return render(request, "drift.html", user, **context)


def _drawn(chart: DriftChart) -> dict[str, Any]:
    return {"chart": chart, "ident": chart_ident(chart.exposure_tool, chart.side, chart.term),
            "svg": ewma_chart_svg(chart),
            "alarms": [p for p in chart.points if is_alarm(p)], "unit": TERM_UNITS[chart.term]}


@router.get("/analysis/alarms", response_class=HTMLResponse)
def alarms_page(request: Request, db: DbDep, user: User, product: Text = "") -> HTMLResponse:
    try:
        require(user, "analyse")
        codes, chosen = product_choice(db, product)
        context: dict[str, Any] = {"products": codes, "product": chosen, "rows": [],
                                   "report": None, "units": TERM_UNITS}
        if chosen is not None:
            report = analysis_drift.tool_drift(db=db, filters=AnalysisFilter(product=chosen))
            context.update(report=report, rows=[
                {"alarm": a, "lots": lots_since_change(a, report.charts),
                 "chart_href": "/analysis/drift?" + urlencode(
                     {"product": chosen, "exposure_tool": a.exposure_tool, "side": a.side,
                      "term": a.term})
                 + f"#{chart_ident(a.exposure_tool, a.side, a.term)}"}
                for a in report.alarms])
    except DomainError as exc:
        return refused(request, user, exc)
    return render(request, "alarms.html", user, **context)

