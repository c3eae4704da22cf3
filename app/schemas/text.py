"""The strings the service takes, checked in one place.

Every string the API takes (body fields, path and query parameters) and the text columns of an
imported CSV file go through :func:`control_problem`. NUL cannot be stored by PostgreSQL (its
text types refuse it) and the other C0 control characters have no business in a serial, a lot or
a tool name; free text (a hold reason, a disposition note) may keep tab and line breaks.

Serials and product codes are path segments (``/panels/{serial}``), so they are held to a
character set that every client sends unchanged: they start with a letter or a digit and go on
with letters, digits and ``. _ : -``. That rules out ``.`` and ``..`` (which clients fold away
by path normalisation, RFC 3986 section 5.2.4) and any name made only of dots.
"""

from __future__ import annotations

import re
from typing import Annotated, Final

from pydantic import AfterValidator, Field

#: C0 controls and DEL; free text keeps tab, line feed and carriage return.
_CONTROL: Final = re.compile(r"[\x00-\x1f\x7f]")
_CONTROL_IN_TEXT: Final = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f]")

IDENTIFIER_PATTERN: Final = r"^[A-Za-z0-9][A-Za-z0-9._:-]*$"


def control_problem(value: str, *, multiline: bool = False) -> str | None:
    """Why ``value`` cannot be taken (a control character, named with its position), or None.

    The CSV import's text columns call this too, so that a file and a POST are held to one rule.
    """
    found = (_CONTROL_IN_TEXT if multiline else _CONTROL).search(value)
    if found is None:
        return None
    code = ord(found.group())
    what = "NUL" if code == 0 else f"U+{code:04X}"
    return (f"contains the control character {what} at position {found.start() + 1}; "
            "only printable text is accepted")


def single_line(value: str) -> str:
    if (problem := control_problem(value)) is not None:
        raise ValueError(problem)
    return value


def free_text(value: str) -> str:
    if (problem := control_problem(value, multiline=True)) is not None:
        raise ValueError(problem)
    return value


#: A name on one line: lot, tool, product name, key label.
Name = Annotated[str, AfterValidator(single_line), Field(min_length=1, max_length=64)]
#: A serial or product code: also a path segment (see the module docstring for the rule).
Identifier = Annotated[
    str, AfterValidator(single_line),
    Field(min_length=1, max_length=64, pattern=IDENTIFIER_PATTERN,
          description="Starts with a letter or digit; then letters, digits and . _ : -"),
]
#: Free text a person writes: a hold reason, a disposition note.
Note = Annotated[str, AfterValidator(free_text), Field(min_length=3, max_length=2000)]
