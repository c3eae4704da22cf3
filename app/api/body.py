"""ASGI middleware that reads the body of every POST once, refuses it when it is over the size
limit (413), and keeps the bytes in the scope so that a refused upload can be stored whole."""

from __future__ import annotations

from typing import Any

from starlette.requests import Request
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from app.api.problems import refused
from app.config import get_settings


class BodyCapture:
    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http" or scope["method"] not in ("POST", "PUT", "PATCH"):
            await self.app(scope, receive, send)
            return
        settings = get_settings()
        is_import = scope["path"].startswith("/api/v1/imports")
        limit = settings.max_import_bytes if is_import else settings.max_body_bytes
        chunks: list[bytes] = []
        size = 0
        more = True
        while more:
            message = await receive()
            if message["type"] == "http.disconnect":
                return
            chunk = message.get("body", b"")
            size += len(chunk)
            chunks.append(chunk)
            more = message.get("more_body", False)
            if size > limit:
                scope["stackledger.body"] = b"".join(chunks)
                scope["stackledger.body_truncated"] = True
                response = await refused(
                    Request(scope), status=413, title="Payload too large",
                    slug="payload-too-large",
                    detail=f"the body is over the limit of {limit} bytes for {scope['path']}",
                )
                await response(scope, receive, send)
                return
        body = b"".join(chunks)
        scope["stackledger.body"] = body
        replayed = False

        async def replay() -> Message:
            nonlocal replayed
            if not replayed:
                replayed = True
                return {"type": "http.request", "body": body, "more_body": False}
            return await receive()

        await self.app(scope, replay, send)


def raw_body(request: Request) -> bytes:
    value: Any = request.scope.get("stackledger.body", b"")
    return bytes(value)
