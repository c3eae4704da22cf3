"""The ``stackledger`` command line."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer
from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

from app.cli_analysis import analysis_cli
from app.db import Database
from app.errors import DomainError
from app.reports import wide_console

cli = typer.Typer(help="stackledger: panel traceability and front-to-back overlay.",
                  no_args_is_help=True, add_completion=False)
db_cli = typer.Typer(help="Database schema.", no_args_is_help=True)
key_cli = typer.Typer(help="API keys.", no_args_is_help=True)
cli.add_typer(db_cli, name="db")
cli.add_typer(key_cli, name="key")
cli.add_typer(analysis_cli, name="analysis")
err = wide_console(stderr=True)
out = wide_console()


def _fail(exc: DomainError) -> None:
    err.print(f"[red]error[/red]: {exc.detail}")
    for e in exc.errors[:20]:
        where = f"row {e.row}" if e.row is not None else (e.pointer or "")
        column = f", column {e.column}" if e.column else ""
        err.print(f"  {where}{column}: {e.message}")
    raise typer.Exit(2)


@db_cli.command("upgrade")
def db_upgrade() -> None:
    """Bring the database (STACKLEDGER_DATABASE_URL) to the latest schema."""
    from app.store.migrate import upgrade

    db = Database()
    upgrade(db.engine)
    err.print("database is at the latest schema")


@key_cli.command("create")
def key_create(
    role: Annotated[str, typer.Option(help="tool, engineer, supervisor or admin")],
    label: Annotated[str, typer.Option(help="Who or what holds the key")],
) -> None:
    """Create an API key; the key alone is printed on stdout, once."""
    from app.services import keys

    try:
        key, _ = keys.create(db=Database(), role=role, label=label)
    except DomainError as exc:
        _fail(exc)
    print(key)


@key_cli.command("revoke")
def key_revoke(prefix: str) -> None:
    """Revoke a key by its prefix (the 8 hex characters after 'sl_')."""
    from app.services import keys

    try:
        keys.revoke(db=Database(), prefix=prefix)
    except DomainError as exc:
        _fail(exc)
    err.print(f"key {prefix} revoked")


def import_file(db: Database, path: Path, label: str) -> None:
    """Import one CSV file with a progress bar; a refused file is kept with its reason."""
    from app.services import imports

    with Progress(TextColumn("[bold]import[/bold] {task.description}"), BarColumn(),
                  TextColumn("{task.completed:,} rows"), TimeElapsedColumn(),
                  console=err, transient=False) as bar:
        task = bar.add_task(path.name, total=None)
        try:
            result = imports.import_path(db=db, path=path, label=label,
                                         progress=lambda n: bar.advance(task, n))
        except DomainError as exc:
            _fail(exc)
    err.print(f"imported {result.rows:,} rows: {result.measurements:,} measurements of "
              f"{result.panels:,} panels ({result.superseded} superseded)")


@cli.command("import")
def import_command(file: Path) -> None:
    """Import a CSV file of site rows (same rules as POST /api/v1/imports)."""
    import_file(Database(), file, label="cli")


@cli.command("serve")
def serve(host: str = "127.0.0.1", port: int = 8000) -> None:
    """Serve the API (docs at /docs)."""
    import uvicorn

    uvicorn.run("app.main:app", host=host, port=port)


@cli.command("panel")
def panel(serial: str) -> None:
    """Print one panel's state."""
    from app.services import panels

    try:
        p = panels.get(db=Database(), serial=serial)
    except DomainError as exc:
        _fail(exc)
    from app.reports import print_panel

    print_panel(out, p)


@cli.command("holds")
def holds_command(
    csv: Annotated[bool, typer.Option("--csv", help="CSV on stdout instead of a table")] = False,
    state: str = "open",
) -> None:
    """The hold list for the shift start."""
    from app.reports import print_holds
    from app.services import holds
    from app.services.hold_list import holds_csv

    try:
        hold_list = holds.list_all_holds(db=Database(), state=state)
    except DomainError as exc:
        _fail(exc)
    if csv:
        print(holds_csv(hold_list), end="")
    else:
        print_holds(out, hold_list)


@cli.command("demo")
def demo(
    serve_api: Annotated[bool, typer.Option("--serve/--no-serve",
                                            help="Serve the API after loading")] = True,
    database: Path = Path("stackledger-demo.db"),
    host: str = "127.0.0.1",
    port: int = 8000,
) -> None:
    """Load the invented demo scenario into a fresh SQLite file, print the panels closest to
    their limit, the hold list and a key per role, then serve the API."""
    from app.demo.loader import load_demo

    url = load_demo(database, console=out, load=lambda db: import_file(
        db, SAMPLE_MEASUREMENTS, label="demo metrology"))
    if serve_api:
        import os

        import uvicorn

        os.environ["STACKLEDGER_DATABASE_URL"] = url
        from app.config import get_settings

        get_settings.cache_clear()
        out.print(f"\nserving on http://{host}:{port}  (API docs: http://{host}:{port}/docs; "
                  "Ctrl-C stops)")
        uvicorn.run("app.main:app", host=host, port=port)


SAMPLE_MEASUREMENTS = Path(__file__).resolve().parents[1] / "sample_data" / "measurements.csv"


def main() -> None:
    cli()
