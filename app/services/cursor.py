"""Opaque cursors for keyset pagination: the sort values of the last row of a page."""

from __future__ import annotations

import base64
import json
from typing import Any

from app.errors import InvalidInput


def encode(values: list[Any]) -> str:
    return base64.urlsafe_b64encode(json.dumps(values).encode()).decode()


def decode(cursor: str, length: int) -> list[Any]:
    """The values in ``cursor``; InvalidInput unless it is a list of ``length`` values."""
    try:
        values = json.loads(base64.urlsafe_b64decode(cursor.encode()))
    except ValueError as exc:
        raise InvalidInput("cursor is not one this service gave out") from exc
    if not isinstance(values, list) or len(values) != length:
        raise InvalidInput("cursor is not one this service gave out")
    return values


def refused() -> InvalidInput:
    return InvalidInput("cursor is not one this service gave out")
