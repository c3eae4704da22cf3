"""Health (no key) and Prometheus metrics (any key)."""

from __future__ import annotations

from fastapi import APIRouter, Request
from fastapi.responses import JSONResponse, PlainTextResponse

from app.api.deps import DbDep, Metrics
from app.api.problems import PROBLEM_RESPONSES
from app.services import metrics

router = APIRouter(tags=["service"])


@router.get("/api/v1/health", responses={503: {"description": "Database unreachable"}})
def health(db: DbDep) -> JSONResponse:
    """Liveness and database reachability (503 when the database does not answer); no key."""
    database = metrics.database_ok(db=db)
    ok = database == "ok"
    return JSONResponse({"status": "ok" if ok else "degraded", "database": database},
                        status_code=200 if ok else 503)


@router.get("/metrics", response_class=PlainTextResponse, responses={
    code: PROBLEM_RESPONSES[code] for code in (401, 403, 500)})
def prometheus(request: Request, db: DbDep, _: Metrics) -> PlainTextResponse:
    """Request counts and latencies, and store gauges, in the Prometheus text format."""
    return PlainTextResponse(metrics.exposition(db=db,
                                                requests=request.app.state.request_metrics),
                             media_type="text/plain; version=0.0.4; charset=utf-8")
