"""The supervisor's commands: the hold list (open or closed), a manual hold, a disposition.

A command run at the terminal acts as the person named by ``--by`` (kept in the hold and the
audit log as ``cli: <name>``); whoever can run it already holds the database, so there is no
key to check. Dispositions rest with the fab's own quality procedures and qualified engineers.
"""

from __future__ import annotations

from typing import Annotated

import typer

from app.cli_store import DatabaseOption, err, fail, out, store
from app.errors import DomainError
from app.services.keys import Principal

By = Annotated[str, typer.Option("--by", help="Who decides (kept in the audit log)")]


def _principal(by: str, role: str) -> Principal:
    from app.services import limits
    from app.store.tables import Hold

    try:
        label = limits.checked(f"cli: {by.strip()}", Hold.disposed_by, what="--by")
    except DomainError as exc:
        fail(exc)
    return Principal(key_id=0, label=label, role=role)


def holds_command(
    csv: Annotated[bool, typer.Option("--csv", help="CSV on stdout instead of a table")] = False,
    state: Annotated[str, typer.Option(help="open or closed")] = "open",
    database: DatabaseOption = None,
) -> None:
    """The hold list for the shift start, worst first then oldest (closed holds with their
    disposition). Risk levels, rules and columns are explained in docs/glossary.md."""
    from app.reports import print_holds
    from app.services import holds
    from app.services.hold_list import holds_csv

    try:
        hold_list = holds.list_all_holds(db=store(database), state=state)
    except DomainError as exc:
        fail(exc)
    if csv:
        print(holds_csv(hold_list), end="")
        err.print(hold_list.caution, soft_wrap=True)  # on stderr: the CSV stays clean
    else:
        print_holds(out, hold_list, closed=state == "closed")


def hold_command(
    serial: str,
    reason: Annotated[str, typer.Option(help="Why the panel is held")],
    by: By,
    database: DatabaseOption = None,
) -> None:
    """Put a panel on hold by hand."""
    from pydantic import ValidationError

    from app.schemas.holds import HoldCreate
    from app.services import holds

    try:
        data = HoldCreate(reason=reason)
    except ValidationError as exc:
        err.print(f"[red]error[/red]: --reason: {exc.errors()[0]['msg']}")
        raise typer.Exit(2) from None
    try:
        hold = holds.place(db=store(database), serial=serial, data=data,
                           principal=_principal(by, "engineer"))
    except DomainError as exc:
        fail(exc)
    out.print(f"hold {hold.id} placed on {hold.panel} by {hold.held_by}")


def disposition_command(
    hold_id: Annotated[str, typer.Argument(help="The hold id, or its first characters")],
    action: Annotated[str, typer.Option(help="release, scrap or rework")],
    note: Annotated[str, typer.Option(help="Why, and on whose authority")],
    by: By,
    layer: Annotated[int | None, typer.Option(help="Rework: the layer reworked")] = None,
    side: Annotated[str | None, typer.Option(help="Rework: its side, A or B")] = None,
    database: DatabaseOption = None,
) -> None:
    """Close an open hold: release, scrap or rework (of a named layer and side), with a note."""
    from pydantic import ValidationError

    from app.schemas.holds import DispositionCreate
    from app.services import holds

    try:
        data = DispositionCreate(action=action, note=note, layer=layer, side=side)
    except ValidationError as exc:
        first = exc.errors()[0]
        err.print(f"[red]error[/red]: {'/'.join(map(str, first['loc']))}: {first['msg']}")
        raise typer.Exit(2) from None
    db = store(database)
    try:
        full_id = holds.open_hold_id(db=db, id_or_prefix=hold_id)
        hold = holds.dispose(db=db, hold_id=full_id, data=data,
                             principal=_principal(by, "supervisor"))
    except DomainError as exc:
        fail(exc)
    out.print(f"hold {hold.id} on {hold.panel} closed: {hold.disposition} by "
              f"{hold.disposition_by}")
    if hold.rework:
        out.print(f"layer {hold.rework.layer} side {hold.rework.side} set aside; its next "
                  "measurement takes its place, and the panel's risk was recomputed")
