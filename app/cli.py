"""The ``stackledger`` command line."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated

import typer
from rich.progress import BarColumn, Progress, TextColumn, TimeElapsedColumn

from app import cli_holds, cli_records
from app.cli_analysis import analysis_cli
from app.cli_store import DatabaseOption, err, fail, out, store
from app.db import Database
from app.errors import DomainError

cli = typer.Typer(help="stackledger: panel traceability and front-to-back overlay.",
                  no_args_is_help=True, add_completion=False)
db_cli = typer.Typer(help="Database schema.", no_args_is_help=True)
key_cli = typer.Typer(help="API keys.", no_args_is_help=True)
cli.add_typer(db_cli, name="db")
cli.add_typer(key_cli, name="key")
cli.command("holds")(cli_holds.holds_command)
cli.command("hold")(cli_holds.hold_command)
cli.command("disposition")(cli_holds.disposition_command)
cli.command("audit")(cli_records.audit_command)
cli.command("rejected")(cli_records.rejected_command)
cli.add_typer(analysis_cli, name="analysis")


@db_cli.command("upgrade")
def db_upgrade(database: DatabaseOption = None) -> None:
    """Create the database or bring it to the latest schema."""
    from app.store.migrate import upgrade

    db = store(database, create=True)
    upgrade(db.engine)
    err.print("database is at the latest schema")


@key_cli.command("create")
def key_create(
    role: Annotated[
        str, typer.Option(help="uploader (the metrology tool's key), engineer, supervisor or admin")
    ],
    label: Annotated[str, typer.Option(help="Who or what holds the key")],
    database: DatabaseOption = None,
) -> None:
    """Create an API key; the key alone is printed on stdout, once."""
    from app.services import keys

    try:
        key, _ = keys.create(db=store(database), role=role, label=label)
    except DomainError as exc:
        fail(exc)
    print(key)


@key_cli.command("revoke")
def key_revoke(prefix: str, database: DatabaseOption = None) -> None:
    """Revoke a key by its prefix (the 8 hex characters after 'sl_')."""
    from app.services import keys

    try:
        keys.revoke(db=store(database), prefix=prefix)
    except DomainError as exc:
        fail(exc)
    err.print(f"key {prefix} revoked")


def import_file(db: Database, path: Path, label: str) -> None:
    """Import one CSV file with a progress bar; a refused file is kept with its reason."""
    from app.services import imports

    with Progress(TextColumn("[bold]import[/bold] {task.description}"), BarColumn(),
                  TextColumn("{task.completed:,} rows"), TimeElapsedColumn(),
                  console=err, transient=False) as bar:
        task = bar.add_task(path.name, total=None)
        try:
            repeat, result = imports.import_path(db=db, path=path, label=label,
                                                 progress=lambda n: bar.advance(task, n))
        except DomainError as exc:
            fail(exc)
    if repeat:
        err.print(f"{path.name} was imported before with the same content; nothing applied "
                  "again")
        return
    err.print(f"imported {result.rows:,} rows: {result.measurements:,} measurements of "
              f"{result.panels:,} panels ({result.superseded} superseded)")


@cli.command("import")
def import_command(file: Path, database: DatabaseOption = None) -> None:
    """Import a CSV file of site rows (same rules as POST /api/v1/imports)."""
    if not file.is_file():
        err.print(f"[red]error[/red]: no file at {file}")
        raise typer.Exit(2)
    import_file(store(database), file, label="cli")


@cli.command("serve")
def serve(
    host: str = "127.0.0.1",
    port: int = 8000,
    database: DatabaseOption = None,
    workers: Annotated[int, typer.Option(min=1, max=64, help="Server processes; on PostgreSQL "
                                         "about one per core serves concurrent posts best")] = 1,
) -> None:
    """Serve the API (docs at /docs)."""
    import os

    import uvicorn

    from app.cli_store import url_of

    store(database).close()  # refuse to serve a database without the schema
    os.environ["STACKLEDGER_DATABASE_URL"] = url_of(database)
    from app.config import get_settings

    get_settings.cache_clear()
    uvicorn.run("app.main:app", host=host, port=port, workers=workers, log_level="warning")


@cli.command("panel")
def panel(serial: str, database: DatabaseOption = None) -> None:
    """Print one panel: status, risk level, layers reached, current FTB, worst L2L, the final
    FTB forecast and the reasons (words and codes: docs/glossary.md)."""
    from app.services import panels

    try:
        p = panels.get(db=store(database), serial=serial)
    except DomainError as exc:
        fail(exc)
    from app.reports import print_panel

    print_panel(out, p)


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

    url = load_demo(database, console=out, load=lambda db, day: import_file(
        db, day, label="demo metrology"))
    out.print(f"\nThe demo's database is {database}; the other commands reach it with "
              f"--database {database} (or STACKLEDGER_DATABASE_URL={url}), for example "
              f"`stackledger holds --database {database}`.", soft_wrap=True)
    if not serve_api:
        out.print(f"pages, once served (stackledger serve --database {database}): "
                  f"http://{host}:{port}/sign-in")
    if serve_api:
        import os

        import uvicorn

        os.environ["STACKLEDGER_DATABASE_URL"] = url
        from app.config import get_settings

        get_settings.cache_clear()
        out.print(f"\nserving on http://{host}:{port}  (API docs: http://{host}:{port}/docs; "
                  "Ctrl-C stops)")
        out.print(f"pages: http://{host}:{port}/sign-in  (sign in with a key above: the "
                  "supervisor's for the shift board and dispositions)")
        uvicorn.run("app.main:app", host=host, port=port)




def main() -> None:
    cli()
