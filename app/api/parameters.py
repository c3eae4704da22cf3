"""One check of the path and query parameters of every route, run before the route's own.

- A parameter value with a control character is refused (``app.schemas.text``), so that no
  NUL reaches a PostgreSQL query.
- A query parameter the route does not know is refused and named: a misspelt or unsupported
  filter (``?tool=X`` on the panel list) must not look as if it had been applied.
"""

from __future__ import annotations

from fastapi import Request
from fastapi.dependencies.models import Dependant
from fastapi.routing import APIRoute

from app.errors import FieldError, InvalidInput
from app.schemas.text import control_problem


def _query_names(dependant: Dependant) -> set[str]:
    names = {p.alias for p in dependant.query_params}
    for sub in dependant.dependencies:
        names |= _query_names(sub)
    return names


def checked_parameters(request: Request) -> None:
    """Refuse control characters in path and query values and unknown query parameters."""
    errors: list[FieldError] = []
    for name, value in request.path_params.items():
        if isinstance(value, str) and (problem := control_problem(value)):
            errors.append(FieldError(message=problem, pointer=f"path:/{name}"))
    route = request.scope.get("route")
    known = _query_names(route.dependant) if isinstance(route, APIRoute) else None
    for name, value in request.query_params.multi_items():
        if known is not None and name not in known:
            allowed = ", ".join(sorted(known)) or "none"
            errors.append(FieldError(
                message=f"unknown query parameter {name!r}; this route takes: {allowed}",
                pointer=f"query:/{name}"))
        elif problem := control_problem(value):
            errors.append(FieldError(message=problem, pointer=f"query:/{name}"))
    if errors:
        first = errors[0]
        raise InvalidInput(f"{len(errors)} problem(s) in the request parameters; first at "
                           f"{first.pointer}: {first.message}", errors)
