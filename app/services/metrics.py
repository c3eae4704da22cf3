"""Figures for Prometheus: request counters kept in the process, gauges read from the store."""

from __future__ import annotations

from collections import Counter
from threading import Lock

from sqlalchemy import func, select, text

from app.db import Database
from app.store.tables import Hold, Measurement, PanelState, RejectedUpload

_requests: Counter[tuple[str, str, int]] = Counter()
_lock = Lock()


_anonymous_refusals = 0


def count_anonymous_refusal() -> None:
    """A write refused for want of a valid key: counted, never stored."""
    global _anonymous_refusals
    with _lock:
        _anonymous_refusals += 1


def count_request(method: str, route: str, status: int) -> None:
    with _lock:
        _requests[(method, route, status)] += 1


def database_ok(*, db: Database) -> str:
    try:
        with db.engine.connect() as conn:
            conn.execute(text("SELECT 1"))
        return "ok"
    except Exception as exc:  # health reports, it does not raise
        return f"unreachable: {type(exc).__name__}"


def exposition(*, db: Database) -> str:
    lines = [
        "# HELP stackledger_http_requests_total HTTP requests answered, by route and status.",
        "# TYPE stackledger_http_requests_total counter",
    ]
    with _lock:
        for (method, route, status), n in sorted(_requests.items()):
            lines.append(
                f'stackledger_http_requests_total{{method="{method}",route="{route}",'
                f'status="{status}"}} {n}'
            )
    lines += [
        "# HELP stackledger_anonymous_refusals_total Writes refused for want of a valid key "
        "(counted, not stored).",
        "# TYPE stackledger_anonymous_refusals_total counter",
        f"stackledger_anonymous_refusals_total {_anonymous_refusals}",
    ]
    with db.reading() as session:
        measurements = session.scalar(select(func.count()).select_from(Measurement)) or 0
        rejected = session.scalar(select(func.count()).select_from(RejectedUpload)) or 0
        open_holds = session.scalar(
            select(func.count()).select_from(Hold).where(Hold.state == "open")
        ) or 0
        by_risk = session.execute(
            select(PanelState.risk, func.count()).group_by(PanelState.risk)
        ).all()
    lines += [
        "# HELP stackledger_measurements_stored Measurements in the store (superseded included).",
        "# TYPE stackledger_measurements_stored gauge",
        f"stackledger_measurements_stored {measurements}",
        "# HELP stackledger_rejected_uploads Uploads refused and kept with their reason.",
        "# TYPE stackledger_rejected_uploads gauge",
        f"stackledger_rejected_uploads {rejected}",
        "# HELP stackledger_open_holds Holds waiting for disposition.",
        "# TYPE stackledger_open_holds gauge",
        f"stackledger_open_holds {open_holds}",
        "# HELP stackledger_panels_by_risk Panels by current risk level.",
        "# TYPE stackledger_panels_by_risk gauge",
    ]
    lines += [f'stackledger_panels_by_risk{{risk="{r}"}} {n}' for r, n in sorted(by_risk)]
    return "\n".join(lines) + "\n"
