"""Figures for Prometheus (text exposition format 0.0.4).

- Requests: a counter and a latency histogram per method, route template and status, kept in
  the process by a :class:`RequestMetrics` that the app owns (``app.state.request_metrics``).
  Labels are bounded: a method outside the standard HTTP ones is counted as ``other`` and a path
  that matched no route as ``unmatched``, so no caller can add series by sending odd requests.
- Store gauges: a scrape must cost the same with a year of data as with a day, so there is no
  full-table count. Open holds and the panels at watch or worse are counted on their indexes
  (they are the short lists a supervisor works through); the measurements and refused uploads
  stored are estimates: the planner's row count on PostgreSQL (``pg_class.reltuples``, as of the
  last ANALYZE) and the largest rowid on SQLite (rows are never deleted, so it is the count).
"""

from __future__ import annotations

import bisect
from collections import defaultdict
from dataclasses import dataclass, field
from threading import Lock
from typing import Final

from sqlalchemy import func, select, text
from sqlalchemy.orm import Session

from app.db import Database
from app.store.tables import Hold, PanelEstimate

METHODS: Final = frozenset({"GET", "HEAD", "POST", "PUT", "PATCH", "DELETE", "OPTIONS"})
#: Upper bounds of the latency buckets, seconds (Prometheus client libraries' defaults).
BUCKETS: Final = (0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1.0, 2.5, 5.0, 10.0)
WATCHED_RISKS: Final = ("watch", "at_risk", "over_limit")


@dataclass
class _Series:
    count: int = 0
    total_seconds: float = 0.0
    buckets: list[int] = field(default_factory=lambda: [0] * len(BUCKETS))


class RequestMetrics:
    """Request counts and latencies of one app, by bounded labels; thread safe."""

    def __init__(self) -> None:
        self._lock = Lock()
        self._series: dict[tuple[str, str, int], _Series] = defaultdict(_Series)
        self._anonymous_refusals = 0

    def count_anonymous_refusal(self) -> None:
        """A write refused for want of a valid key: counted, never stored."""
        with self._lock:
            self._anonymous_refusals += 1

    def observe(self, *, method: str, route: str, status: int, seconds: float) -> None:
        key = (method if method in METHODS else "other", route, status)
        with self._lock:
            series = self._series[key]
            series.count += 1
            series.total_seconds += seconds
            at = bisect.bisect_left(BUCKETS, seconds)
            if at < len(BUCKETS):
                series.buckets[at] += 1

    def lines(self) -> list[str]:
        out = [
            "# HELP stackledger_http_requests_total HTTP requests answered, by route and status.",
            "# TYPE stackledger_http_requests_total counter",
        ]
        with self._lock:
            items = sorted((k, _Series(s.count, s.total_seconds, list(s.buckets)))
                           for k, s in self._series.items())
            anonymous = self._anonymous_refusals
        for (method, route, status), s in items:
            out.append(f'stackledger_http_requests_total{{method="{method}",route="{route}",'
                       f'status="{status}"}} {s.count}')
        out += [
            "# HELP stackledger_http_request_duration_seconds Time to answer, by route.",
            "# TYPE stackledger_http_request_duration_seconds histogram",
        ]
        for (method, route, status), s in items:
            labels = f'method="{method}",route="{route}",status="{status}"'
            running = 0
            for bound, n in zip(BUCKETS, s.buckets, strict=True):
                running += n
                out.append(f'stackledger_http_request_duration_seconds_bucket{{{labels},'
                           f'le="{bound}"}} {running}')
            out += [
                f'stackledger_http_request_duration_seconds_bucket{{{labels},le="+Inf"}} '
                f"{s.count}",
                f"stackledger_http_request_duration_seconds_sum{{{labels}}} "
                f"{s.total_seconds:.6f}",
                f"stackledger_http_request_duration_seconds_count{{{labels}}} {s.count}",
            ]
        out += [
            "# HELP stackledger_anonymous_refusals_total Writes refused for want of a valid key "
            "(counted, not stored).",
            "# TYPE stackledger_anonymous_refusals_total counter",
            f"stackledger_anonymous_refusals_total {anonymous}",
        ]
        return out


def database_ok(*, db: Database) -> str:
    try:
        with db.engine.connect() as conn:
            conn.execute(text("SELECT 1"))
        return "ok"
    except Exception as exc:  # health reports, it does not raise
        return f"unreachable: {type(exc).__name__}"


def _estimated_rows(session: Session, table: str) -> int:
    """Rows in ``table`` without counting them (see the module docstring)."""
    if session.get_bind().dialect.name == "postgresql":
        value = session.scalar(text("SELECT reltuples FROM pg_class WHERE relname = :t"),
                               {"t": table})
    else:
        # ``table`` is one of the two fixed names above, never input.
        value = session.scalar(text(f"SELECT max(rowid) FROM {table}"))
    return max(int(value or 0), 0)


def exposition(*, db: Database, requests: RequestMetrics) -> str:
    lines = requests.lines()
    with db.reading() as session:
        measurements = _estimated_rows(session, "measurements")
        rejected = _estimated_rows(session, "rejected_uploads")
        open_holds = session.scalar(
            select(func.count()).select_from(Hold).where(Hold.state == "open")
        ) or 0
        by_risk = dict(session.execute(
            select(PanelEstimate.risk, func.count()).where(PanelEstimate.risk.in_(WATCHED_RISKS))
            .group_by(PanelEstimate.risk)
        ).all())
    lines += [
        "# HELP stackledger_measurements_stored Measurements in the store, superseded included "
        "(an estimate: no table is counted per scrape).",
        "# TYPE stackledger_measurements_stored gauge",
        f"stackledger_measurements_stored {measurements}",
        "# HELP stackledger_rejected_uploads Refused uploads kept with their reason (estimate).",
        "# TYPE stackledger_rejected_uploads gauge",
        f"stackledger_rejected_uploads {rejected}",
        "# HELP stackledger_open_holds Holds waiting for disposition.",
        "# TYPE stackledger_open_holds gauge",
        f"stackledger_open_holds {open_holds}",
        "# HELP stackledger_panels_by_risk Panels at watch or worse, by current risk level.",
        "# TYPE stackledger_panels_by_risk gauge",
    ]
    lines += [f'stackledger_panels_by_risk{{risk="{r}"}} {by_risk.get(r, 0)}'
              for r in WATCHED_RISKS]
    return "\n".join(lines) + "\n"
