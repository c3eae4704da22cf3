"""Checks on free text that comes in as a filter or a form field."""

from __future__ import annotations

from app.errors import FieldError, InvalidInput


def refuse_nul(**values: str | None) -> None:
    """A NUL cannot be stored or compared by PostgreSQL (SQLite would take it): refuse it by
    name, the same on both databases."""
    bad = [name for name, v in values.items() if v is not None and "\0" in v]
    if bad:
        raise InvalidInput("a filter or field contains a NUL character",
                           [FieldError("NUL character", pointer=f"query:/{n}") for n in bad])
