"""What every command of the command line shares: its consoles, its one-line failures, and
how it finds its database and says so when it cannot.

Every command takes ``--database``: a SQLAlchemy URL (``sqlite:///path``, ``postgresql://...``)
or a plain file path, which means a SQLite file. Without it the command reads
``STACKLEDGER_DATABASE_URL``, and without that ``./stackledger.db``. ``stackledger demo`` writes
``./stackledger-demo.db`` and prints the option that reaches it.

A command that reads or writes never creates a database by accident: a missing SQLite file or
a database without the schema is one line naming the command that sets it up, not a traceback
and an empty file left behind.
"""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, NoReturn

import typer
from sqlalchemy import inspect
from sqlalchemy.engine import make_url
from sqlalchemy.exc import ArgumentError, SQLAlchemyError

from app.config import get_settings
from app.db import Database
from app.errors import DomainError
from app.reports import wide_console

err = wide_console(stderr=True)
out = wide_console()

DatabaseOption = Annotated[str | None, typer.Option(
    "--database", envvar="STACKLEDGER_DATABASE_URL", show_envvar=True,
    help="Database URL, or a SQLite file path. Default: ./stackledger.db "
         "(`stackledger demo` writes ./stackledger-demo.db).")]


class StoreUnavailable(Exception):
    """The database cannot be used; the message says why and what to run."""


def url_of(database: str | None) -> str:
    """The SQLAlchemy URL for ``--database`` (a URL, a file path, or None for the default)."""
    if not database:
        return get_settings().database_url
    if "://" in database:
        return database
    return f"sqlite:///{Path(database).expanduser().resolve()}"


def _shown(url: str) -> str:
    try:
        return make_url(url).render_as_string(hide_password=True)
    except ArgumentError:
        return url


def open_store(database: str | None, *, create: bool = False) -> Database:
    """The database named by ``--database``; StoreUnavailable unless it exists and carries the
    schema (``create``: the file may be new, for ``db upgrade``)."""
    url = url_of(database)
    try:
        parsed = make_url(url)
    except ArgumentError as exc:
        raise StoreUnavailable(f"'{url}' is not a database URL or a file path") from exc
    upgrade_hint = f"run `stackledger db upgrade --database {_shown(url)}`"
    if parsed.get_backend_name() == "sqlite" and not create:
        path = parsed.database or ""
        if path not in ("", ":memory:") and not Path(path).is_file():
            raise StoreUnavailable(
                f"no database at {path}: {upgrade_hint} to create one, or `stackledger demo` "
                "for the demo (then add --database stackledger-demo.db)")
    try:
        db = Database(url)
    except (SQLAlchemyError, ValueError, ImportError) as exc:
        raise StoreUnavailable(f"cannot use {_shown(url)}: {exc}") from exc
    if create:
        return db
    try:
        tables = set(inspect(db.engine).get_table_names())
    except SQLAlchemyError as exc:
        db.close()
        first = str(exc).splitlines()[0]
        raise StoreUnavailable(f"cannot reach {_shown(url)}: {first}") from exc
    if not {"alembic_version", "panels"} <= tables:
        db.close()
        raise StoreUnavailable(f"{_shown(url)} has no stackledger schema: {upgrade_hint}")
    return db


def store(database: str | None, *, create: bool = False) -> Database:
    """The database of ``--database``, or one line saying why not and what to run."""
    try:
        return open_store(database, create=create)
    except StoreUnavailable as exc:
        err.print(f"[red]error[/red]: {exc}", soft_wrap=True)
        raise typer.Exit(2) from None


def fail(exc: DomainError) -> NoReturn:
    """A refused command: what is wrong and where, on stderr; exit status 2."""
    err.print(f"[red]error[/red]: {exc.detail}", soft_wrap=True)
    for e in exc.errors[:20]:
        where = f"line {e.line}" if e.line is not None else (e.pointer or "")
        column = f", column {e.column}" if e.column else ""
        err.print(f"  {where}{column}: {e.message}", soft_wrap=True)
    raise typer.Exit(2)
