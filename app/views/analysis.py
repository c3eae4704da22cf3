"""The FTB analysis as flat tables (one dict per row), CSV, Parquet and terminal tables.

Every report flattens to named tables; the API, the CLI and the exports all use these, so a
column means the same everywhere. CSV cells are made safe against formula injection as the hold
list's are. Parquet goes through pyarrow with the column types inferred from the values.
"""

from __future__ import annotations

import csv
import io
from collections.abc import Callable
from datetime import datetime
from typing import Any

import pyarrow as pa
import pyarrow.parquet as pq
from pydantic import BaseModel
from rich.table import Table

from app.schemas.analysis import (
    DriftReport,
    FingerprintReport,
    LotReport,
    ShareReport,
    SiteVectors,
    TrendReport,
)
from app.services.hold_list import safe_cell

Row = dict[str, Any]


def fingerprint_tables(r: FingerprintReport) -> dict[str, list[Row]]:
    rows = []
    for f in r.rows:
        for own, rest, diff in zip(f.terms_facing_side, f.rest_facing_side,
                                   f.difference_facing_side, strict=True):
            rows.append({
                "exposure_tool": f.exposure_tool, "side": f.side, "layer": f.layer,
                "term": own.term,
                "count": f.count, "mean_facing_side": own.mean, "half_width": own.half_width,
                "rest_count": f.rest_count, "rest_mean": rest.mean,
                "rest_half_width": rest.half_width, "difference": diff.mean,
                "difference_half_width": diff.half_width,
            })
    what_if = [w.model_dump() for w in r.what_if]
    return {"fingerprints": rows, "what_if": what_if}


def share_tables(r: ShareReport) -> dict[str, list[Row]]:
    lots = [{"lot": lot.lot, "panels": lot.panels, **c.model_dump()}
            for lot in r.by_lot for c in lot.by_exposure_tool]
    return {
        "layer_side": [c.model_dump() for c in r.by_layer_side],
        "exposure_tool": [c.model_dump() for c in r.by_exposure_tool],
        "lot_exposure_tool": lots,
        "components": [c.model_dump() for c in r.components],
    }


def drift_tables(r: DriftReport) -> dict[str, list[Row]]:
    alarms = [{**a.model_dump(), "rules": "; ".join(a.rules)} for a in r.alarms]
    points = [{"exposure_tool": c.exposure_tool, "side": c.side, "term": c.term,
               "centre": c.centre, **p.model_dump(), "rules": "; ".join(p.rules)}
              for c in r.charts for p in c.points]
    return {"alarms": alarms, "points": points}


def _distribution_row(key: str, value: str, row: BaseModel) -> Row:
    data = row.model_dump()
    by_risk = data.pop("by_risk")
    data.pop(key, None)
    return {key: value, **{f"risk_{k}": v for k, v in by_risk.items()}, **data}


def lot_tables(r: LotReport) -> dict[str, list[Row]]:
    return {"lots": [_distribution_row("lot", x.lot, x) for x in r.lots]}


def trend_tables(r: TrendReport) -> dict[str, list[Row]]:
    return {"periods": [_distribution_row("period", x.period, x) for x in r.rows]}


def vector_tables(r: SiteVectors) -> dict[str, list[Row]]:
    return {"sites": [s.model_dump() for s in r.sites]}


TABLES: dict[type[BaseModel], Callable[[Any], dict[str, list[Row]]]] = {
    FingerprintReport: fingerprint_tables, ShareReport: share_tables, DriftReport: drift_tables,
    LotReport: lot_tables, TrendReport: trend_tables, SiteVectors: vector_tables,
}


def tables(report: BaseModel) -> dict[str, list[Row]]:
    return TABLES[type(report)](report)


def _plain(value: Any) -> Any:
    if isinstance(value, tuple | list):
        return " ".join(str(v) for v in value)
    if hasattr(value, "isoformat"):
        return value.isoformat()
    return value


def to_csv(rows: list[Row], *, caption: str | None = None) -> str:
    out = io.StringIO()
    writer = csv.writer(out, lineterminator="\n")
    if caption:
        writer.writerow([f"# {caption}"])
    if rows:
        writer.writerow(list(rows[0]))
        for row in rows:
            writer.writerow([safe_cell(_plain(v)) for v in row.values()])
    return out.getvalue()


def to_parquet(rows: list[Row]) -> bytes:
    table = pa.Table.from_pylist([{k: _plain(v) for k, v in row.items()} for row in rows])
    sink = io.BytesIO()
    pq.write_table(table, sink)
    return sink.getvalue()


def _cell(value: Any) -> str:
    if value is None:
        return "-"
    if isinstance(value, datetime):
        return value.strftime("%Y-%m-%d %H:%M")
    if isinstance(value, float):
        return f"{value:.4g}"
    return str(_plain(value))


def rich_table(title: str, rows: list[Row], *, limit: int | None = None) -> Table:
    """A terminal table of ``rows`` (numbers right-aligned, four significant digits)."""
    table = Table(title=title)
    if not rows:
        table.add_column("(no rows)")
        return table
    for name, value in rows[0].items():
        numeric = isinstance(value, int | float) and not isinstance(value, bool)
        table.add_column(name, justify="right" if numeric else "left")
    for row in rows[:limit]:
        table.add_row(*(_cell(v) for v in row.values()))
    return table
