"""Health (no key) and Prometheus metrics (any key)."""

from __future__ import annotations

from fastapi import APIRouter
from fastapi.responses import PlainTextResponse

from app.api.deps import DbDep, Metrics
from app.services import metrics

router = APIRouter(tags=["service"])


@router.get("/api/v1/health")
def health(db: DbDep) -> dict[str, str]:
    """Liveness and database reachability; needs no key."""
    return {"status": "ok", "database": metrics.database_ok(db=db)}


@router.get("/metrics", response_class=PlainTextResponse)
def prometheus(db: DbDep, _: Metrics) -> PlainTextResponse:
    """Counters and gauges in the Prometheus text exposition format."""
    return PlainTextResponse(metrics.exposition(db=db),
                             media_type="text/plain; version=0.0.4; charset=utf-8")
