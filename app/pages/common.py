"""What every page route shares: the templates, the signed-in user, CSRF and error pages.

A page route is as thin as an API route: it reads its session, calls the same service the API
calls, and hands typed data to a template and the chart builders in ``app.views``.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path
from typing import Annotated, Any
from urllib.parse import quote

from fastapi import Depends, Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response
from fastapi.templating import Jinja2Templates

from app.api.deps import DbDep, page_secret
from app.errors import DomainError, InvalidInput, Unauthenticated
from app.schemas.holds import CAUTION
from app.services import keys, sessions
from app.services.inputs import refuse_nul
from app.services.keys import Principal
from app.views import text

TEMPLATES = Jinja2Templates(directory=str(Path(__file__).parent / "templates"))
TEMPLATES.env.filters.update(text.FILTERS)
TEMPLATES.env.globals.update(caution=CAUTION)


class PageInputRefused(Exception):
    """Raised by the page input check; answered with the HTML error page."""

    def __init__(self, error: DomainError) -> None:
        super().__init__(error.detail)
        self.error = error


async def checked_input(request: Request) -> None:
    """Every page's query, path and form text is free of NUL characters (PostgreSQL cannot
    store or compare them), checked once for all page routes."""
    values = {**request.query_params, **request.path_params}
    if request.method == "POST":
        form = await request.form()
        values.update({k: v for k, v in form.items() if isinstance(v, str)})
    try:
        refuse_nul(**{str(k): str(v) for k, v in values.items()})
    except InvalidInput as exc:
        raise PageInputRefused(exc) from exc


def input_refused(request: Request, exc: Exception) -> Response:
    assert isinstance(exc, PageInputRefused)
    return refused(request, None, exc.error)


class SignInRequired(Exception):
    """Raised by the page dependency; answered with a redirect to the sign-in page."""

    def __init__(self, next_path: str, reason: str) -> None:
        super().__init__(reason)
        self.next_path = next_path
        self.reason = reason


@dataclass(frozen=True)
class SignedIn:
    principal: Principal
    nonce: str
    secret: bytes

    @property
    def csrf(self) -> str:
        return sessions.csrf_token(self.secret, self.nonce)

    def may(self, action: str) -> bool:
        return self.principal.role in keys.PERMISSIONS[action]

    def check_csrf(self, token: str | None) -> None:
        sessions.check_csrf(self.secret, self.nonce, token)


def signed_in(request: Request, db: DbDep) -> SignedIn:
    secret = page_secret(request)
    try:
        s = sessions.resume(db=db, secret=secret, token=request.cookies.get(sessions.COOKIE))
    except Unauthenticated as exc:
        target = request.url.path + (f"?{request.url.query}" if request.url.query else "")
        raise SignInRequired(target, exc.detail) from exc
    return SignedIn(principal=s.principal, nonce=s.nonce, secret=secret)


User = Annotated[SignedIn, Depends(signed_in)]


def render(request: Request, name: str, user: SignedIn | None, status_code: int = 200,
           **context: Any) -> HTMLResponse:
    return TEMPLATES.TemplateResponse(
        request, name, {"user": user, "path": request.url.path, **context},
        status_code=status_code,
        # Pages show panel data: never kept by a shared cache, never framed by another site.
        headers={"Cache-Control": "no-store", "X-Frame-Options": "DENY",
                 "Content-Security-Policy": "default-src 'self'; frame-ancestors 'none'; "
                 "form-action 'self'; base-uri 'none'"},
    )


def refused(request: Request, user: SignedIn | None, error: DomainError) -> HTMLResponse:
    """An error page that says what is wrong, with the status the API would give."""
    return render(request, "refused.html", user, status_code=error.status, error=error)


def require(user: SignedIn, action: str) -> None:
    """Forbidden unless the signed-in role may do ``action`` (the same rule as the API)."""
    user.principal.require(action)


def sign_in_redirect(request: Request, exc: Exception) -> Response:
    assert isinstance(exc, SignInRequired)
    return RedirectResponse(f"/sign-in?next={quote(exc.next_path, safe='/')}", status_code=303)

