"""``stackledger analysis``: what drives FTB, as terminal tables, CSV and Parquet files.

Each command takes the same filters as the API (product, exposure tool, side, layer, lot, from, to),
prints its tables, and with ``--csv DIR`` / ``--parquet DIR`` writes every table of the report
there as ``<command>-<table>.csv`` / ``.parquet``.
"""

from __future__ import annotations

from collections.abc import Callable
from datetime import UTC, datetime
from pathlib import Path
from typing import Annotated, Literal

import typer
from pydantic import BaseModel, ValidationError
from rich.progress import Progress, SpinnerColumn, TextColumn, TimeElapsedColumn

from app.cli_store import DatabaseOption, store
from app.db import Database
from app.errors import DomainError
from app.reports import wide_console
from app.schemas.analysis import AnalysisFilter, DriftSettings
from app.services import analysis_drift, analysis_ftb, analysis_lots, analysis_tools
from app.views.analysis import rich_table, tables, to_csv, to_parquet

analysis_cli = typer.Typer(help="What drives FTB: exposure tools, layers, sides, lots, drift.",
                           no_args_is_help=True)
out = wide_console()
err = wide_console(stderr=True)

Product = Annotated[str, typer.Option(help="Product code")]
Tool = Annotated[str | None, typer.Option("--exposure-tool",
                                          help="Exposure tool (not the metrology tool)")]
SideOpt = Annotated[str | None, typer.Option(help="A or B")]
LayerOpt = Annotated[int | None, typer.Option(help="Layer number")]
LotOpt = Annotated[str | None, typer.Option(help="Lot code")]
From = Annotated[datetime | None, typer.Option("--from", help="Measured at or after (UTC)")]
To = Annotated[datetime | None, typer.Option("--to", help="Measured before (UTC)")]
CsvDir = Annotated[Path | None, typer.Option("--csv", help="Write every table as CSV here")]
ParquetDir = Annotated[Path | None, typer.Option("--parquet",
                                                 help="Write every table as Parquet here")]
Rows = Annotated[int, typer.Option(help="Rows shown per table (files hold them all)")]


def _utc(value: datetime | None) -> datetime | None:
    return value if value is None or value.tzinfo else value.replace(tzinfo=UTC)


def _filters(product: str, tool: str | None, side: str | None, layer: int | None,
             lot: str | None, start: datetime | None, end: datetime | None) -> AnalysisFilter:
    try:
        return AnalysisFilter(product=product, exposure_tool=tool, side=side, layer=layer,  # type: ignore[arg-type]
                              lot=lot, start=_utc(start), end=_utc(end))
    except ValidationError as exc:
        err.print(f"[red]error[/red]: {exc.errors()[0]['loc'][0]}: {exc.errors()[0]['msg']}")
        raise typer.Exit(2) from None


def _run(name: str, compute: Callable[[Database], BaseModel], csv_dir: Path | None,
         parquet_dir: Path | None, rows: int, database: str | None) -> None:
    db = store(database)
    try:
        with Progress(SpinnerColumn(), TextColumn(f"[bold]{name}[/bold] reading the store"),
                      TimeElapsedColumn(), console=err, transient=True) as progress:
            progress.add_task(name, total=None)
            report = compute(db)
    except DomainError as exc:
        err.print(f"[red]error[/red]: {exc.detail}")
        raise typer.Exit(2) from None
    finally:
        db.close()
    note = getattr(report, "note", "")
    for table_name, table_rows in tables(report).items():
        out.print(rich_table(f"{name}: {table_name}", table_rows, limit=rows))
        for folder, suffix in ((csv_dir, "csv"), (parquet_dir, "parquet")):
            if folder is None:
                continue
            folder.mkdir(parents=True, exist_ok=True)
            path = folder / f"{name}-{table_name}.{suffix}"
            if suffix == "csv":
                path.write_text(to_csv(table_rows, caption=note), encoding="utf-8")
            else:
                path.write_bytes(to_parquet(table_rows))
            err.print(f"wrote {path}")
    if note:
        out.print(note)


@analysis_cli.command("fingerprints")
def fingerprints(product: Product, tool: Tool = None, side: SideOpt = None,
                 layer: LayerOpt = None, lot: LotOpt = None, start: From = None, end: To = None,
                 by_layer: bool = False, csv: CsvDir = None, parquet: ParquetDir = None,
                 rows: Rows = 40, database: DatabaseOption = None) -> None:
    """Mean terms per exposure tool and side (and layer) in the tool's own (facing-side) frame;
    the FTB what-if."""
    f = _filters(product, tool, side, layer, lot, start, end)
    _run("fingerprints", lambda db: analysis_tools.tool_fingerprints(
        db=db, filters=f, by_layer=by_layer), csv, parquet, rows, database)


@analysis_cli.command("shares")
def shares(product: Product, tool: Tool = None, side: SideOpt = None, layer: LayerOpt = None,
           lot: LotOpt = None, start: From = None, end: To = None, csv: CsvDir = None,
           parquet: ParquetDir = None, rows: Rows = 40, database: DatabaseOption = None) -> None:
    """Shares of the mean FTB by layer and side, exposure tool and lot; variance components."""
    f = _filters(product, tool, side, layer, lot, start, end)
    _run("shares", lambda db: analysis_ftb.ftb_shares(db=db, filters=f), csv, parquet, rows,
         database)


@analysis_cli.command("drift")
def drift(product: Product, tool: Tool = None, side: SideOpt = None, layer: LayerOpt = None,
          lot: LotOpt = None, start: From = None, end: To = None,
          lam: Annotated[float, typer.Option(help="EWMA weight lambda")] = 0.2,
          k: Annotated[float, typer.Option(help="Limit width in sigmas")] = 3.0,
          baseline_days: Annotated[float, typer.Option(help="Baseline window, days")] = 7.0,
          csv: CsvDir = None, parquet: ParquetDir = None, rows: Rows = 40,
          database: DatabaseOption = None) -> None:
    """Drift alarms per exposure tool, side and term, with the estimated change start."""
    f = _filters(product, tool, side, layer, lot, start, end)
    try:
        settings = DriftSettings(lam=lam, k=k, baseline_days=baseline_days)
    except ValidationError as exc:
        err.print(f"[red]error[/red]: {exc.errors()[0]['loc'][0]}: {exc.errors()[0]['msg']}")
        raise typer.Exit(2) from None
    _run("drift", lambda db: analysis_drift.tool_drift(db=db, filters=f, settings=settings),
         csv, parquet, rows, database)


@analysis_cli.command("lots")
def lots(product: Product, tool: Tool = None, side: SideOpt = None, layer: LayerOpt = None,
         lot: LotOpt = None, start: From = None, end: To = None, csv: CsvDir = None,
         parquet: ParquetDir = None, rows: Rows = 40, database: DatabaseOption = None) -> None:
    """Per lot: panels by risk level, FTB distribution, forecast share within limit."""
    f = _filters(product, tool, side, layer, lot, start, end)
    _run("lots", lambda db: analysis_lots.lot_summary(db=db, filters=f), csv, parquet, rows,
         database)


@analysis_cli.command("trend")
def trend(product: Product, period: Annotated[str, typer.Option(help="day or week")] = "day",
          tool: Tool = None, side: SideOpt = None, layer: LayerOpt = None, lot: LotOpt = None,
          start: From = None, end: To = None, csv: CsvDir = None, parquet: ParquetDir = None,
          rows: Rows = 40, database: DatabaseOption = None) -> None:
    """The lot figures for the whole product by day or ISO week."""
    if period not in ("day", "week"):
        err.print("[red]error[/red]: period must be 'day' or 'week'")
        raise typer.Exit(2)
    chosen: Literal["day", "week"] = "day" if period == "day" else "week"
    f = _filters(product, tool, side, layer, lot, start, end)
    _run("trend", lambda db: analysis_lots.product_trend(db=db, filters=f, period=chosen),
         csv, parquet, rows, database)


@analysis_cli.command("vectors")
def vectors(serial: str, side: str, layer: int, csv: CsvDir = None, parquet: ParquetDir = None,
            rows: Rows = 40, database: DatabaseOption = None) -> None:
    """Site vectors of one panel, side and layer (posted, panel frame, model, residual)."""
    if side not in ("A", "B"):
        err.print("[red]error[/red]: side must be 'A' or 'B'")
        raise typer.Exit(2)
    _run("vectors", lambda db: analysis_lots.site_vectors(db=db, panel=serial, side=side,
                                                          layer=layer), csv, parquet, rows,
         database)
