"""The methods a path allows, answered the same way everywhere.

FastAPI registers one route per method, so on its own an ``OPTIONS`` request or a 405 names only
the first route that matched the path (``Allow: POST`` for ``/api/v1/panels``). Here ``OPTIONS``
answers 204 with every method of the path (RFC 9110, 9.3.7), and a 405 names them all in its
``Allow`` header (RFC 9110, 15.5.6). No key is needed to learn the methods of a path.
"""

from __future__ import annotations

import re
from typing import Any

from starlette.routing import compile_path
from starlette.types import ASGIApp, Message, Receive, Scope, Send

PathTable = list[tuple[re.Pattern[str], frozenset[str]]]


def _path_table(app: Any) -> PathTable:
    """Path patterns and their methods, from the app's own OpenAPI document (the public list of
    its routes). Built once per app and kept on ``app.state``: routes do not change once the app
    serves."""
    table: PathTable | None = getattr(app.state, "allowed_methods", None)
    if table is None:
        table = [(compile_path(path)[0], frozenset(m.upper() for m in operations))
                 for path, operations in app.openapi()["paths"].items()]
        app.state.allowed_methods = table
    return table


def allowed_methods(app: Any, path: str) -> list[str]:
    """Every method that some route of ``app`` takes at ``path``; empty for an unknown path."""
    found: set[str] = set()
    for pattern, methods in _path_table(app):
        if pattern.match(path):
            found |= methods
    return sorted(found | {"OPTIONS"}) if found else []


class AllowedMethods:
    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        app, path = scope["app"], scope["path"]
        if scope["method"] == "OPTIONS":
            methods = allowed_methods(app, path)
            if methods:
                await send({"type": "http.response.start", "status": 204,
                            "headers": [(b"allow", ", ".join(methods).encode())]})
                await send({"type": "http.response.body", "body": b""})
                return

        async def send_with_allow(message: Message) -> None:
            if message["type"] == "http.response.start" and message["status"] == 405:
                methods = ", ".join(allowed_methods(app, path)).encode()
                headers = [(k, v) for k, v in message.get("headers", []) if k.lower() != b"allow"]
                message = {**message, "headers": [*headers, (b"allow", methods)]}
            await send(message)

        await self.app(scope, receive, send_with_allow)
