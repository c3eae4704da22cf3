"""Server-rendered pages for the line and the engineers (Jinja2 templates, SVG charts drawn on
the server, static files served by the app: no build step, no network)."""

from __future__ import annotations

from pathlib import Path

from fastapi import Depends, FastAPI
from fastapi.staticfiles import StaticFiles

from app.pages import analysis, auth, board, dispositions, drift, lists, lots, panel
from app.pages.common import (
    PageInputRefused,
    SignInRequired,
    checked_input,
    input_refused,
    sign_in_redirect,
)

ROUTERS = (auth.router, board.router, lists.router, panel.router, dispositions.router,
           lots.router, analysis.router, drift.router)


def install(app: FastAPI) -> None:
    for router in ROUTERS:
        app.include_router(router, dependencies=[Depends(checked_input)])
    app.add_exception_handler(SignInRequired, sign_in_redirect)
    app.add_exception_handler(PageInputRefused, input_refused)
    app.mount("/static/pages", StaticFiles(directory=str(Path(__file__).parent / "static")),
              name="pages-static")
