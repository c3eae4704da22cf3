"""ASGI middleware for request bodies of POST, PUT and PATCH.

- An API write from a caller without a valid key is answered 401 before its body is read: an
  anonymous caller can make the server neither buffer a large upload nor write to the store.
- A body over the size limit is refused (413) as soon as it passes the limit.
- The body is kept so that a refused upload can be stored with it: a small body in memory, an
  import spooled to a temporary file past ``SPOOL_BYTES`` (its first ``MAX_KEPT_BYTES`` stay in
  memory for the record), then replayed to the application in chunks.
"""

from __future__ import annotations

import tempfile
from typing import Any

from starlette.concurrency import run_in_threadpool
from starlette.requests import Request
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from app.api.problems import problem_response, refused
from app.config import get_settings
from app.services import keys
from app.services.rejections import MAX_KEPT_BYTES

SPOOL_BYTES = 8 * 1024 * 1024
REPLAY_CHUNK = 1024 * 1024


def _authorization(scope: Scope) -> str | None:
    for name, value in scope.get("headers", []):
        if name == b"authorization":
            return str(value.decode("latin-1"))
    return None


class BodyCapture:
    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http" or scope["method"] not in ("POST", "PUT", "PATCH"):
            await self.app(scope, receive, send)
            return
        if scope["path"].startswith("/api/"):
            label = await run_in_threadpool(keys.label_for, db=scope["app"].state.db,
                                            authorization=_authorization(scope))
            if label == keys.NO_VALID_KEY:
                scope["app"].state.request_metrics.count_anonymous_refusal()
                response = problem_response(
                    Request(scope), status=401, title="Not authenticated",
                    slug="unauthenticated",
                    detail="this needs a valid API key: 'Authorization: Bearer <key>'; the "
                           "body was not read")
                await response(scope, receive, send)
                return
            scope["stackledger.key_label"] = label
        settings = get_settings()
        is_import = scope["path"].startswith("/api/v1/imports")
        limit = settings.max_import_bytes if is_import else settings.max_body_bytes
        # An ordinary post is kept whole (its bytes are the Idempotency-Key's digest); an
        # import keeps its head for the record of a refusal.
        keep = MAX_KEPT_BYTES if is_import else limit
        kept = bytearray()
        spool = tempfile.SpooledTemporaryFile(max_size=SPOOL_BYTES)  # noqa: SIM115
        try:
            size = 0
            more = True
            while more:
                message = await receive()
                if message["type"] == "http.disconnect":
                    return
                chunk = message.get("body", b"")
                size += len(chunk)
                if len(kept) <= keep:
                    kept += chunk[: keep + 1 - len(kept)]
                more = message.get("more_body", False)
                if size > limit:
                    scope["stackledger.body"] = bytes(kept)
                    scope["stackledger.body_truncated"] = True
                    response = await refused(
                        Request(scope), status=413, title="Payload too large",
                        slug="payload-too-large",
                        detail=f"the body is over the limit of {limit} bytes for "
                               f"{scope['path']}",
                    )
                    await response(scope, receive, send)
                    return
                spool.write(chunk)
            scope["stackledger.body"] = bytes(kept)
            scope["stackledger.body_truncated"] = size > len(kept)
            spool.seek(0)
            await self.app(scope, _replay(spool, receive), send)
        finally:
            spool.close()


def _replay(spool: Any, receive: Receive) -> Receive:
    done = False

    async def replay() -> Message:
        nonlocal done
        if done:
            return await receive()
        chunk = spool.read(REPLAY_CHUNK)
        more = len(chunk) == REPLAY_CHUNK
        done = not more
        return {"type": "http.request", "body": chunk, "more_body": more}

    return replay


def raw_body(request: Request) -> bytes:
    """The body as sent (whole for an ordinary post; an import keeps only its first
    ``MAX_KEPT_BYTES``)."""
    value: Any = request.scope.get("stackledger.body", b"")
    return bytes(value)
