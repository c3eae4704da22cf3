"""Annotated dependencies so that handlers read as plain signatures."""

from __future__ import annotations

from collections.abc import Callable
from typing import Annotated

from fastapi import Depends, Request
from fastapi.security import HTTPAuthorizationCredentials, HTTPBearer

from app.db import Database
from app.services import keys, sessions
from app.services.keys import Principal

_bearer = HTTPBearer(auto_error=False, description="An API key: 'Authorization: Bearer <key>'")


def get_db(request: Request) -> Database:
    db: Database = request.app.state.db
    return db


DbDep = Annotated[Database, Depends(get_db)]
SAFE_METHODS = frozenset({"GET", "HEAD"})


def page_secret(request: Request) -> bytes:
    """The session secret, loaded once per app (tests may set ``app.state.session_secret``)."""
    secret: bytes | None = getattr(request.app.state, "session_secret", None)
    if secret is None:
        secret = request.app.state.session_secret = sessions.load_secret()
    return secret


def _allowed(action: str) -> Callable[..., Principal]:
    def dependency(
        request: Request,
        db: DbDep,
        credentials: Annotated[HTTPAuthorizationCredentials | None, Depends(_bearer)],
    ) -> Principal:
        token = request.cookies.get(sessions.COOKIE)
        if credentials is None and token and request.method in SAFE_METHODS:
            # A signed-in page (the board's CSV link) reads with its session; anything that
            # writes needs the Bearer key, so the API needs no CSRF token.
            principal = sessions.resume(db=db, secret=page_secret(request), token=token).principal
        else:
            header = f"Bearer {credentials.credentials}" if credentials else None
            principal = keys.authenticate(db=db, authorization=header)
        request.scope["stackledger.key_label"] = principal.label
        principal.require(action)
        return principal

    dependency.__name__ = f"allow_{action}"
    return dependency


PostMeasurement = Annotated[Principal, Depends(_allowed("post_measurement"))]
RegisterPanel = Annotated[Principal, Depends(_allowed("register_panel"))]
ReadProduct = Annotated[Principal, Depends(_allowed("read_product"))]
CreateProduct = Annotated[Principal, Depends(_allowed("create_product"))]
ReadPanels = Annotated[Principal, Depends(_allowed("query"))]
PlaceHold = Annotated[Principal, Depends(_allowed("hold"))]
Disposition = Annotated[Principal, Depends(_allowed("disposition"))]
Metrics = Annotated[Principal, Depends(_allowed("metrics"))]
Analyse = Annotated[Principal, Depends(_allowed("analyse"))]
ReadAudit = Annotated[Principal, Depends(_allowed("read_audit"))]
ReadRejections = Annotated[Principal, Depends(_allowed("read_rejections"))]
