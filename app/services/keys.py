"""API keys and roles.

A key is ``sl_<prefix>_<secret>``; it is shown once, at creation. The store keeps only the
SHA-256 of the whole key and the short prefix (not secret; it names the key in lists and logs).
"""

from __future__ import annotations

import hashlib
import secrets
from dataclasses import dataclass
from typing import Final

from sqlalchemy import select

from app.db import Database
from app.errors import Forbidden, InvalidInput, NotFound, Unauthenticated
from app.schemas import codes
from app.services import limits
from app.store.tables import ApiKey, utcnow

ROLES: Final = tuple(codes.codes(codes.ROLES))
NO_VALID_KEY: Final = "(no valid key)"

#: What each action needs. Admin may do everything.
PERMISSIONS: Final[dict[str, frozenset[str]]] = {
    "post_measurement": frozenset({"uploader", "admin"}),
    "register_panel": frozenset({"uploader", "engineer", "supervisor", "admin"}),
    "read_product": frozenset(ROLES),
    "create_product": frozenset({"admin"}),
    "query": frozenset({"engineer", "supervisor", "admin"}),
    "hold": frozenset({"engineer", "supervisor", "admin"}),
    "disposition": frozenset({"supervisor", "admin"}),
    "metrics": frozenset(ROLES),
    "analyse": frozenset({"engineer", "supervisor", "admin"}),
    "read_audit": frozenset({"engineer", "supervisor", "admin"}),
    # Each key sees its own refused uploads; admin sees all (see services.rejections).
    "read_rejections": frozenset(ROLES),
}


@dataclass(frozen=True)
class Principal:
    key_id: int
    label: str
    role: str

    def require(self, action: str) -> None:
        allowed = PERMISSIONS[action]
        if self.role not in allowed:
            raise Forbidden(
                f"role '{self.role}' may not {action.replace('_', ' ')}; "
                f"this needs one of: {', '.join(sorted(allowed))}"
            )


def _digest(key: str) -> str:
    return hashlib.sha256(key.encode("utf-8")).hexdigest()


def create(*, db: Database, role: str, label: str) -> tuple[str, str]:
    """Create a key; returns (the key, shown only now; its prefix)."""
    if role not in ROLES:
        raise InvalidInput(f"role must be one of {', '.join(ROLES)}, got '{role}'")
    if not label.strip():
        raise InvalidInput("label must not be empty")
    label = limits.checked(label.strip(), ApiKey.label, what="label")
    prefix = secrets.token_hex(4)
    key = f"sl_{prefix}_{secrets.token_urlsafe(24)}"
    with db.transaction() as session:
        session.add(ApiKey(prefix=prefix, sha256=_digest(key), role=role, label=label))
    return key, prefix


def revoke(*, db: Database, prefix: str) -> None:
    with db.transaction() as session:
        row = session.scalars(select(ApiKey).where(ApiKey.prefix == prefix)).one_or_none()
        if row is None:
            raise NotFound(f"no key with prefix '{prefix}'")
        row.revoked_at = row.revoked_at or utcnow()


def authenticate(*, db: Database, authorization: str | None) -> Principal:
    """The principal behind an ``Authorization: Bearer <key>`` header."""
    if not authorization:
        raise Unauthenticated("send the API key as 'Authorization: Bearer <key>'")
    scheme, _, key = authorization.partition(" ")
    if scheme.lower() != "bearer" or not key.strip():
        raise Unauthenticated("the Authorization header must read 'Bearer <key>'")
    with db.reading() as session:
        row = session.scalars(
            select(ApiKey).where(ApiKey.sha256 == _digest(key.strip()))
        ).one_or_none()
        if row is None or row.revoked_at is not None:
            raise Unauthenticated("the API key is unknown or revoked")
        return Principal(key_id=row.id, label=row.label, role=row.role)


def label_for(*, db: Database, authorization: str | None) -> str:
    """The label of the key in a header, or a note of why there is none (never raises on a bad
    key: used to label refused uploads that failed before authentication)."""
    try:
        return authenticate(db=db, authorization=authorization).label
    except Unauthenticated:
        return NO_VALID_KEY


def principal_by_id(*, db: Database, key_id: int) -> Principal:
    """The principal of a key by its id, re-checked on every page request so that a revoked
    key ends its sessions at once."""
    with db.reading() as session:
        row = session.get(ApiKey, key_id)
        if row is None or row.revoked_at is not None:
            raise Unauthenticated("the API key behind this session is unknown or revoked")
        return Principal(key_id=row.id, label=row.label, role=row.role)
