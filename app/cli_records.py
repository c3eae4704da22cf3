"""Reading the records back at the terminal: the audit trail (supervisor, engineer) and the
refused uploads (the tool integrator). Whoever runs a command holds the database, so the
refused uploads of every key are shown."""

from __future__ import annotations

from datetime import datetime
from typing import Annotated

import typer

from app.cli_store import DatabaseOption, fail, out, store
from app.errors import DomainError
from app.services.keys import Principal

Limit = Annotated[int, typer.Option(min=1, max=1000, help="Rows shown, newest first")]


def audit_command(
    panel: Annotated[str | None, typer.Option(help="Only this panel")] = None,
    hold: Annotated[str | None, typer.Option(help="Only this hold id")] = None,
    actor: Annotated[str | None, typer.Option(help="Only this actor (key label or cli: name)")]
    = None,
    since: Annotated[datetime | None, typer.Option(help="From this time on (UTC)")] = None,
    limit: Limit = 50,
    database: DatabaseOption = None,
) -> None:
    """The audit trail: holds, dispositions, registrations, who and when."""
    from datetime import UTC

    from app.reports import print_audit
    from app.services import audit_trail

    try:
        page = audit_trail.list_audit(
            db=store(database), panel=panel, hold=hold, actor=actor,
            since=since.replace(tzinfo=UTC) if since and since.tzinfo is None else since,
            limit=limit)
    except DomainError as exc:
        fail(exc)
    print_audit(out, page)


def rejected_command(limit: Limit = 50, database: DatabaseOption = None) -> None:
    """Refused uploads with their reasons and where each problem is (every key's)."""
    from app.reports import print_rejections
    from app.services import audit_trail

    try:
        page = audit_trail.list_rejections(
            db=store(database), principal=Principal(key_id=0, label="cli", role="admin"),
            limit=limit)
    except DomainError as exc:
        fail(exc)
    print_rejections(out, page)
