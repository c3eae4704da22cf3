"""The domain's exceptions. Services raise these; the HTTP layer maps them in one place
(``app.api.problems``) to RFC 9457 problem documents.

Each carries a human ``detail`` that says what is wrong, and an optional list of ``errors``
that say where (a JSON pointer or a CSV row and column) and what.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any


@dataclass
class FieldError:
    """One problem at one place in the input."""

    message: str
    pointer: str | None = None  # JSON pointer into the body, e.g. "/sites/3/dx_um"
    line: int | None = None  # CSV file line, 1-based, the header is line 1
    column: str | None = None

    def as_dict(self) -> dict[str, Any]:
        return {k: v for k, v in self.__dict__.items() if v is not None}


@dataclass
class DomainError(Exception):
    detail: str
    errors: list[FieldError] = field(default_factory=list)

    status = 400
    title = "Bad request"
    type_slug = "bad-request"

    def __str__(self) -> str:
        return self.detail


class NotFound(DomainError):
    status = 404
    title = "Not found"
    type_slug = "not-found"


class Conflict(DomainError):
    status = 409
    title = "Conflict"
    type_slug = "conflict"


class InvalidInput(DomainError):
    """The request is well-formed but its content cannot be accepted (422)."""

    status = 422
    title = "Invalid input"
    type_slug = "invalid-input"


class Unauthenticated(DomainError):
    status = 401
    title = "Not authenticated"
    type_slug = "unauthenticated"


class Forbidden(DomainError):
    status = 403
    title = "Forbidden"
    type_slug = "forbidden"
