"""The ASGI application (``app.main:app``): builds the app and mounts the routers, nothing more."""

from __future__ import annotations

import importlib.resources
import time
from collections.abc import AsyncIterator, Awaitable, Callable
from contextlib import asynccontextmanager

from fastapi import Depends, FastAPI, Request, Response
from fastapi.openapi.docs import get_swagger_ui_html
from fastapi.responses import HTMLResponse
from fastapi.staticfiles import StaticFiles

from app import pages
from app.api import problems
from app.api.body import BodyCapture
from app.api.methods import AllowedMethods
from app.api.parameters import checked_parameters
from app.api.routes import (
    analysis,
    holds,
    measurements,
    panel_sites,
    panels,
    products,
    records,
    service,
)
from app.db import Database
from app.services import metrics

DESCRIPTION = """
Panel traceability and front-to-back (FTB) overlay forecasting for IC package substrates.

Metrology tools post each layer's overlay per panel and side; the store fits it, accumulates
both sides in the panel frame, forecasts the final FTB and holds panels that are heading out
of limit. Every endpoint except health needs `Authorization: Bearer <key>`. Every error is an
RFC 9457 problem document.

Disposition decisions (release, scrap, rework) rest with the fab's own quality procedures and
qualified engineers.
"""


def create_app(db: Database | None = None) -> FastAPI:
    @asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        yield
        if owned:
            app.state.db.close()

    owned = db is None
    app = FastAPI(
        title="stackledger", version="0.1.0", description=DESCRIPTION, docs_url=None,
        redoc_url=None, lifespan=lifespan, dependencies=[Depends(checked_parameters)],
    )
    app.state.db = db or Database()
    problems.install(app)
    app.add_middleware(BodyCapture)
    app.add_middleware(AllowedMethods)
    for module in (products, panels, panel_sites, measurements, holds, records, service,
                   analysis):
        app.include_router(module.router)
    pages.install(app)
    # Swagger UI 5 (it reads OpenAPI 3.1), from the files bundled in the fastapi-offline package.
    swagger_dir = importlib.resources.files("fastapi_offline") / "static"
    app.mount("/static/swagger", StaticFiles(directory=str(swagger_dir)), name="swagger")

    @app.get("/docs", include_in_schema=False)
    def docs() -> HTMLResponse:
        # Served from the local bundle: the fab network may have no way out.
        return get_swagger_ui_html(
            openapi_url="/openapi.json", title="stackledger API",
            swagger_js_url="/static/swagger/swagger-ui-bundle.js",
            swagger_css_url="/static/swagger/swagger-ui.css",
            swagger_favicon_url="/static/swagger/favicon.png",
        )

    app.state.request_metrics = metrics.RequestMetrics()

    @app.middleware("http")
    async def count(request: Request, call_next: Callable[[Request], Awaitable[Response]]
                    ) -> Response:
        started = time.perf_counter()
        response = await call_next(request)
        route = request.scope.get("route")
        app.state.request_metrics.observe(
            method=request.method, route=getattr(route, "path", "unmatched"),
            status=response.status_code, seconds=time.perf_counter() - started)
        return response

    return app


app = create_app()
