"""Sign-in and sign-out: an API key, given once, becomes a session cookie."""

from __future__ import annotations

import secrets
from typing import Annotated

from fastapi import APIRouter, Form, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response

from app.api.deps import DbDep, page_secret
from app.errors import Forbidden, Unauthenticated
from app.pages.common import User, refused, render
from app.services import sessions

router = APIRouter(include_in_schema=False)


def _landing(role: str) -> str:
    # The tool integrator's page is the refused-uploads list; everyone else starts at the board.
    return "/rejected-uploads" if role == "uploader" else "/board"


def _local(path: str | None) -> str | None:
    """``next`` only when it is a path on this server (no open redirect)."""
    if path and path.startswith("/") and not path.startswith(("//", "/\\")):
        return path
    return None


def _cookie_args(request: Request) -> dict[str, object]:
    return {"httponly": True, "samesite": "strict", "secure": request.url.scheme == "https",
            "path": "/"}


def _form(request: Request, next_path: str | None, status_code: int = 200,
          message: str | None = None) -> HTMLResponse:
    nonce = secrets.token_urlsafe(16)
    response = render(request, "sign_in.html", None, status_code=status_code,
                      csrf=sessions.csrf_token(page_secret(request), nonce),
                      next_path=_local(next_path) or "", message=message)
    response.set_cookie(sessions.SIGN_IN_COOKIE, nonce, max_age=3600,
                        **_cookie_args(request))  # type: ignore[arg-type]
    return response


@router.get("/", response_class=RedirectResponse)
def home() -> RedirectResponse:
    return RedirectResponse("/board", status_code=303)


@router.get("/sign-in", response_class=HTMLResponse)
def sign_in_page(request: Request, next: str | None = None) -> HTMLResponse:
    return _form(request, next)


@router.post("/sign-in", response_model=None)
def sign_in(
    request: Request, db: DbDep, key: Annotated[str, Form(max_length=200)] = "",
    csrf: Annotated[str, Form(max_length=200)] = "",
    next: Annotated[str, Form(max_length=2000)] = "",
) -> Response:
    secret = page_secret(request)
    try:
        sessions.check_csrf(secret, request.cookies.get(sessions.SIGN_IN_COOKIE), csrf)
    except Forbidden as exc:
        return refused(request, None, exc)
    try:
        token, session = sessions.sign_in(db=db, secret=secret, key=key)
    except Unauthenticated:
        return _form(request, next, status_code=401,
                     message="That key is unknown or revoked. Check it and try again.")
    response = RedirectResponse(_local(next) or _landing(session.principal.role),
                                status_code=303)
    response.set_cookie(sessions.COOKIE, token, max_age=sessions.SESSION_SECONDS,
                        **_cookie_args(request))  # type: ignore[arg-type]
    response.delete_cookie(sessions.SIGN_IN_COOKIE, path="/")
    return response


@router.post("/sign-out", response_model=None)
def sign_out(request: Request, user: User,
             csrf: Annotated[str, Form(max_length=200)] = "") -> Response:
    try:
        user.check_csrf(csrf)
    except Forbidden as exc:
        return refused(request, user, exc)
    response = RedirectResponse("/sign-in", status_code=303)
    response.delete_cookie(sessions.COOKIE, path="/", httponly=True, samesite="strict")
    return response
