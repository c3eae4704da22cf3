"""Text lengths checked against the store's own column sizes, in one place.

PostgreSQL refuses a string longer than its ``VARCHAR(n)`` (SQLite would keep it), so every
service that writes text it did not check through a schema asks here first: either to refuse it
with a clear message (a key label typed at the command line) or to shorten it where the text is
only a record of something else (the endpoint or file name of a refused upload).
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import String

from app.errors import FieldError, InvalidInput
from app.schemas.text import control_problem


def length_of(column: Any) -> int | None:
    """The declared length of a mapped string column (``Table.column``), or None."""
    kind = column.property.columns[0].type
    return kind.length if isinstance(kind, String) else None


def checked(value: str, column: Any, *, what: str) -> str:
    """``value`` if it fits ``column`` and is printable text on one line; InvalidInput naming
    ``what`` otherwise."""
    size = length_of(column)
    if size is not None and len(value) > size:
        raise InvalidInput(f"{what} is {len(value)} characters long; at most {size} are kept",
                           [FieldError(message=f"at most {size} characters", pointer=what)])
    if (problem := control_problem(value)) is not None:
        raise InvalidInput(f"{what} {problem}", [FieldError(message=problem, pointer=what)])
    return value


def fitted(value: str, column: Any) -> str:
    """``value`` shortened to ``column``'s length (ending in '...' when cut) with NUL made
    visible: for text that only records what happened and must never stop the record."""
    value = value.replace("\x00", "\\0")
    size = length_of(column)
    if size is None or len(value) <= size:
        return value
    return value[: size - 3] + "..."
