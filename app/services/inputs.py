"""Checks on free text that comes in as a filter or a form field."""

from __future__ import annotations

from app.errors import FieldError, InvalidInput
from app.schemas.text import control_problem


def refuse_nul(**values: str | None) -> None:
    """Refuse a filter or field with a control character by name (a NUL cannot be stored or
    compared by PostgreSQL), with the one rule for strings (``app.schemas.text``)."""
    bad = [(name, problem) for name, v in values.items()
           if v is not None and (problem := control_problem(v, multiline=True))]
    if bad:
        raise InvalidInput(f"{bad[0][0]} {bad[0][1]}",
                           [FieldError(problem, pointer=f"query:/{n}") for n, problem in bad])
