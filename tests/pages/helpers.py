"""Page tests through httpx: sign in as a browser would, read the CSRF token off the form."""

from __future__ import annotations

import re

from fastapi.testclient import TestClient

from app.db import Database
from app.main import create_app

SECRET = b"page-test-secret"
_CSRF = re.compile(r'name="csrf" value="([^"]+)"')


def page_client(db: Database) -> TestClient:
    app = create_app(db)
    app.state.session_secret = SECRET
    return TestClient(app, raise_server_exceptions=True, follow_redirects=False)


def csrf_of(html: str) -> str:
    match = _CSRF.search(html)
    assert match, "the page has no CSRF token"
    return match.group(1)


def sign_in(c: TestClient, key: str) -> str:
    """Sign in with ``key``; returns the CSRF token of the first page after sign-in."""
    form = c.get("/sign-in")
    r = c.post("/sign-in", data={"key": key, "csrf": csrf_of(form.text), "next": ""})
    assert r.status_code == 303, r.text
    landing = c.get(r.headers["location"])
    assert landing.status_code == 200, landing.text
    return csrf_of(landing.text)
