"""Opaque cursors for keyset pagination: the sort values of the last row of a page.

A cursor comes back from the caller, so it is read as untrusted input: each value is parsed by
the reader its position expects (text, number, instant, id), and anything else, a NUL in a
string or a number beyond float range included, is refused as a 422, never passed to a query.
"""

from __future__ import annotations

import base64
import json
import math
import uuid
from collections.abc import Callable
from datetime import datetime
from typing import Any

from app.errors import FieldError, InvalidInput
from app.schemas.text import control_problem

Reader = Callable[[Any], Any]


def encode(values: list[Any]) -> str:
    return base64.urlsafe_b64encode(json.dumps(values).encode()).decode()


def refused() -> InvalidInput:
    return InvalidInput("cursor is not one this service gave out",
                        [FieldError(message="not a cursor of this list", pointer="query:/cursor")])


def text(value: Any) -> str:
    if not isinstance(value, str) or len(value) > 200 or control_problem(value):
        raise ValueError("not a text value")
    return value


def number(value: Any) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise ValueError("not a number")
    result = float(value)
    if not math.isfinite(result):
        raise ValueError("not a finite number")
    return result


def integer(value: Any) -> int:
    if isinstance(value, bool) or not isinstance(value, int) or abs(value) > 2**31:
        raise ValueError("not a small integer")
    return value


def instant(value: Any) -> datetime:
    at = datetime.fromisoformat(text(value))
    if at.tzinfo is None:
        raise ValueError("not an aware timestamp")
    return at


def identifier(value: Any) -> uuid.UUID:
    return uuid.UUID(text(value))


def decode(cursor: str, *readers: Reader) -> list[Any]:
    """The values in ``cursor``, each read by the reader at its position; InvalidInput unless
    it is a list of exactly that many values that all read."""
    try:
        # parse_constant: JSON's NaN and Infinity are not values any cursor holds.
        values = json.loads(base64.urlsafe_b64decode(cursor.encode()),
                            parse_constant=_no_constant)
        if not isinstance(values, list) or len(values) != len(readers):
            raise ValueError("wrong shape")
        return [read(v) for read, v in zip(readers, values, strict=True)]
    except (ValueError, TypeError, OverflowError, RecursionError) as exc:
        raise refused() from exc


def _no_constant(name: str) -> Any:
    raise ValueError(f"{name} is not a cursor value")
