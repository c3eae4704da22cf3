"""One error shape for every 4xx and 5xx: an RFC 9457 problem document
(``application/problem+json``) that says what is wrong (``detail``) and where (``errors``).

Refused uploads (POST of measurements, imports and panels) are also kept, with their body and
reason, in ``rejected_uploads``: nothing sent to the store is dropped silently.
"""

from __future__ import annotations

import logging
from typing import Any, Final

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse
from pydantic import BaseModel, Field
from starlette.concurrency import run_in_threadpool
from starlette.exceptions import HTTPException as StarletteHTTPException

from app.errors import DomainError, FieldError
from app.services import keys, rejections

log = logging.getLogger("stackledger")

PROBLEM_BASE: Final = "https://stackledger.invalid/problems/"
UPLOAD_PATHS: Final = frozenset({"/api/v1/measurements", "/api/v1/imports", "/api/v1/panels"})


class ProblemError(BaseModel):
    message: str
    pointer: str | None = Field(default=None, description="JSON pointer into the body, or "
                                "'query:/name' for a query parameter.")
    line: int | None = Field(default=None, description="CSV file line (the header is line 1).")
    column: str | None = Field(default=None, description="CSV column.")


class Problem(BaseModel):
    """RFC 9457 problem details."""

    type: str
    title: str
    status: int
    detail: str
    instance: str | None = None
    errors: list[ProblemError] = []


PROBLEM_RESPONSES: Final[dict[int | str, dict[str, Any]]] = {
    code: {"model": Problem, "content": {"application/problem+json": {}},
           "description": text}
    for code, text in [
        (400, "Malformed request"), (401, "No valid API key"),
        (403, "Role may not do this"), (404, "Not found"), (409, "Conflict"),
        (413, "Body too large"), (422, "Content not acceptable"), (500, "Service failure"),
    ]
}


def problem_response(
    request: Request, *, status: int, title: str, slug: str, detail: str,
    errors: list[FieldError] | None = None, headers: dict[str, str] | None = None,
) -> JSONResponse:
    body = Problem(
        type=PROBLEM_BASE + slug, title=title, status=status, detail=detail,
        instance=request.url.path,
        errors=[ProblemError(**e.as_dict()) for e in errors or []],
    )
    if status == 401:
        # RFC 9110, 11.6.1: a 401 names the scheme the client should use.
        headers = {**(headers or {}), "WWW-Authenticate": 'Bearer realm="stackledger"'}
    return JSONResponse(
        body.model_dump(exclude_none=True), status_code=status,
        media_type="application/problem+json", headers=headers,
    )


async def refused(
    request: Request, *, status: int, title: str, slug: str, detail: str,
    errors: list[FieldError] | None = None, headers: dict[str, str] | None = None,
) -> JSONResponse:
    """The problem answer to a refused request; a refused upload is kept first (off the event
    loop, since keeping it is a database write)."""
    if request.method == "POST" and request.url.path in UPLOAD_PATHS:
        await run_in_threadpool(_keep_rejected, request, status, detail, errors or [])
    return problem_response(request, status=status, title=title, slug=slug, detail=detail,
                            errors=errors, headers=headers)


def _keep_rejected(request: Request, status: int, detail: str, errors: list[FieldError]) -> None:
    """Keep a refused upload from a known key with its reason and body. A caller without a
    valid key is only counted (``metrics``): anonymous callers must not be able to fill the
    store or take its write lock."""
    db = request.app.state.db
    try:
        label = request.scope.get("stackledger.key_label") or keys.label_for(
            db=db, authorization=request.headers.get("authorization"))
        if label == keys.NO_VALID_KEY:
            request.app.state.request_metrics.count_anonymous_refusal()
            return
        raw: bytes = request.scope.get("stackledger.body", b"")
        rejections.record(
            db=db, endpoint=request.url.path, key_label=label,
            status=status, reason=detail, errors=[e.as_dict() for e in errors],
            content_type=request.headers.get("content-type", ""), body=raw,
            truncated=bool(request.scope.get("stackledger.body_truncated")),
        )
    except Exception:  # the answer must still go out; the log says what was lost
        log.exception("could not record a rejected upload to %s", request.url.path)


def _pointer(loc: tuple[Any, ...]) -> str:
    """A JSON pointer into the body, or 'query:/name' / 'path:/name' for parameters."""
    parts = [str(p) for p in loc[1:]] if loc and loc[0] in ("body", "query", "path") else []
    where = loc[0] if loc else "body"
    return f"{where}:/" + "/".join(parts) if where != "body" else "/" + "/".join(parts)


def _malformed_json(request: Request, error: dict[str, Any]) -> FieldError:
    """A body that is not JSON: where, in lines and columns of the body as sent (the parser
    gives a character offset, which is not a JSON pointer: there is no document to point into)."""
    loc = error.get("loc", ())
    offset = loc[1] if len(loc) > 1 and isinstance(loc[1], int) else None
    why = str((error.get("ctx") or {}).get("error", "not valid JSON"))
    if offset is None:
        return FieldError(message=f"the body is not valid JSON: {why}")
    before = bytes(request.scope.get("stackledger.body", b"")).decode("utf-8", "replace")[:offset]
    line = before.count("\n") + 1
    column = offset - (before.rfind("\n") + 1) + 1
    return FieldError(message=f"the body is not valid JSON at line {line}, column {column} "
                              f"(character {offset + 1}): {why}")


def install(app: FastAPI) -> None:
    @app.exception_handler(DomainError)
    async def _domain(request: Request, exc: DomainError) -> JSONResponse:
        return await refused(request, status=exc.status, title=exc.title, slug=exc.type_slug,
                             detail=exc.detail, errors=exc.errors)

    @app.exception_handler(RequestValidationError)
    async def _validation(request: Request, exc: RequestValidationError) -> JSONResponse:
        errors = [
            _malformed_json(request, e) if e.get("type") == "json_invalid"
            else FieldError(message=str(e.get("msg", "invalid")),
                            pointer=_pointer(tuple(e["loc"])))
            for e in exc.errors()
        ]
        first = errors[0] if errors else FieldError(message="invalid request")
        where = f" at {first.pointer}" if first.pointer else ""
        return await refused(
            request, status=422, title="Invalid input", slug="invalid-input",
            detail=f"{len(errors)} problem(s) in the request; first{where}: {first.message}",
            errors=errors,
        )

    @app.exception_handler(StarletteHTTPException)
    async def _http(request: Request, exc: StarletteHTTPException) -> JSONResponse:
        return await refused(request, status=exc.status_code, title=str(exc.detail),
                             slug="http-" + str(exc.status_code), detail=str(exc.detail),
                             headers=dict(exc.headers or {}))

    @app.exception_handler(Exception)
    async def _unexpected(request: Request, exc: Exception) -> JSONResponse:
        log.exception("unexpected error on %s %s", request.method, request.url.path)
        return await refused(
            request, status=500, title="Internal error", slug="internal-error",
            detail="the service failed on this request; nothing was stored. The error is in "
                   "the service log.",
        )
