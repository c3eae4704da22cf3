"""Page sessions: an API key given once at sign-in becomes a signed, expiring cookie value.

The token is ``<payload>.<signature>``: the payload is base64url JSON ``{"k": key id,
"e": expiry (unix seconds), "n": random nonce}``, the signature HMAC-SHA256 over it with the
server's session secret (RFC 2104). The key itself is never put in the cookie. Every request
re-reads the key by id, so revoking the key ends its sessions at once.

CSRF: every form carries a synchronizer token, HMAC of the session's nonce (or, on the sign-in
form, of a pre-session nonce kept in its own cookie), checked on every POST (OWASP CSRF
Prevention Cheat Sheet, "Synchronizer Token Pattern").
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import json
import os
import secrets
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Final

from app.config import get_settings
from app.db import Database
from app.errors import Forbidden, Unauthenticated
from app.services import keys
from app.services.keys import Principal

#: A shift and its handover; the cookie expires with it.
SESSION_SECONDS: Final = 12 * 3600
COOKIE: Final = "sl_session"
SIGN_IN_COOKIE: Final = "sl_sign_in"


@dataclass(frozen=True)
class PageSession:
    principal: Principal
    nonce: str
    expires: int


def load_secret() -> bytes:
    """The session secret: the setting, else the secret file, generated (0600) if absent."""
    settings = get_settings()
    if settings.session_secret:
        return settings.session_secret.encode("utf-8")
    path = Path(settings.session_secret_file)
    try:
        return path.read_bytes().strip()
    except FileNotFoundError:
        pass
    value = secrets.token_hex(32).encode("ascii")
    try:
        fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    except FileExistsError:  # another worker wrote it first: use theirs
        return path.read_bytes().strip()
    with os.fdopen(fd, "wb") as f:
        f.write(value)
    return value


def _sign(secret: bytes, message: str) -> str:
    return hmac.new(secret, message.encode("ascii"), hashlib.sha256).hexdigest()


def _b64(data: bytes) -> str:
    return base64.urlsafe_b64encode(data).decode("ascii").rstrip("=")


def sign_in(*, db: Database, secret: bytes, key: str, now: float | None = None
            ) -> tuple[str, PageSession]:
    """Check an API key and open a session for it; returns (cookie value, session)."""
    principal = keys.authenticate(db=db, authorization=f"Bearer {key.strip()}")
    expires = int((now or time.time()) + SESSION_SECONDS)
    nonce = secrets.token_urlsafe(16)
    payload = _b64(json.dumps({"k": principal.key_id, "e": expires, "n": nonce}).encode())
    return f"{payload}.{_sign(secret, payload)}", PageSession(principal, nonce, expires)


def resume(*, db: Database, secret: bytes, token: str | None, now: float | None = None
           ) -> PageSession:
    """The session behind a cookie value; Unauthenticated when absent, forged, expired or its
    key revoked."""
    if not token:
        raise Unauthenticated("sign in with an API key")
    payload, _, signature = token.partition(".")
    if not hmac.compare_digest(_sign(secret, payload), signature):
        raise Unauthenticated("the session is not one this server signed; sign in again")
    try:
        data = json.loads(base64.urlsafe_b64decode(payload + "=" * (-len(payload) % 4)))
        key_id, expires, nonce = int(data["k"]), int(data["e"]), str(data["n"])
    except (ValueError, KeyError, TypeError) as exc:
        raise Unauthenticated("the session cannot be read; sign in again") from exc
    if expires <= (now or time.time()):
        raise Unauthenticated("the session has expired; sign in again")
    return PageSession(keys.principal_by_id(db=db, key_id=key_id), nonce, expires)


def csrf_token(secret: bytes, nonce: str) -> str:
    return _sign(secret, f"csrf|{nonce}")


def check_csrf(secret: bytes, nonce: str | None, token: str | None) -> None:
    """Forbidden unless ``token`` is the CSRF token of ``nonce``."""
    if not nonce or not token or not hmac.compare_digest(csrf_token(secret, nonce), token):
        raise Forbidden("the form's CSRF token is missing or does not match this session; "
                        "reload the page and send the form again")
