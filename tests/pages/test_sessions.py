"""Sign-in, sign-out, the session cookie and CSRF, through httpx (the browser tests do the same
in chromium)."""

from __future__ import annotations

import time

import pytest

from app.errors import Forbidden, Unauthenticated
from app.services import keys, sessions
from tests.factories import make_keys
from tests.pages.helpers import SECRET, csrf_of, page_client, sign_in


def test_sign_in_sets_a_strict_httponly_session_and_sign_out_ends_it(db):
    k = make_keys(db)
    c = page_client(db)
    assert c.get("/board").status_code == 303  # not signed in: sent to the sign-in page
    assert c.get("/board").headers["location"] == "/sign-in?next=/board"
    form = c.get("/sign-in")
    r = c.post("/sign-in", data={"key": k["supervisor"], "csrf": csrf_of(form.text),
                                 "next": "/board"})
    assert r.status_code == 303 and r.headers["location"] == "/board"
    cookie = next(h for h in r.headers.get_list("set-cookie")
                  if h.startswith(f"{sessions.COOKIE}="))
    attributes = {a.strip().split("=")[0].lower() for a in cookie.split(";")}
    assert {"httponly", "samesite", "max-age", "path"} <= attributes
    assert "samesite=strict" in cookie.lower()
    assert k["supervisor"] not in cookie  # the key itself never travels in the cookie
    board = c.get("/board")
    assert board.status_code == 200
    assert "test supervisor" in board.text

    out = c.post("/sign-out", data={"csrf": csrf_of(board.text)})
    assert out.status_code == 303 and out.headers["location"] == "/sign-in"
    assert c.get("/board").status_code == 303


def test_wrong_key_and_missing_csrf_are_refused(db):
    k = make_keys(db)
    c = page_client(db)
    form = c.get("/sign-in")
    r = c.post("/sign-in", data={"key": "sl_nope_nope", "csrf": csrf_of(form.text)})
    assert r.status_code == 401 and "unknown or revoked" in r.text
    r = c.post("/sign-in", data={"key": k["admin"]})
    assert r.status_code == 403 and "CSRF" in r.text
    assert sessions.COOKIE not in c.cookies
    token = sign_in(c, k["admin"])
    assert c.post("/sign-out", data={}).status_code == 403
    assert c.post("/sign-out", data={"csrf": token[:-2] + "00"}).status_code == 403
    assert c.get("/board").status_code == 200  # still signed in


def test_open_redirect_is_not_followed(db):
    k = make_keys(db)
    c = page_client(db)
    form = c.get("/sign-in")
    r = c.post("/sign-in", data={"key": k["engineer"], "csrf": csrf_of(form.text),
                                 "next": "//elsewhere.invalid/x"})
    assert r.headers["location"] == "/board"


def test_revoking_the_key_ends_its_session_at_once(db):
    k = make_keys(db)
    c = page_client(db)
    sign_in(c, k["engineer"])
    assert c.get("/board").status_code == 200
    keys.revoke(db=db, prefix=k["engineer"].split("_")[1])
    assert c.get("/board").status_code == 303


def test_session_tokens_are_signed_and_expire(db):
    k = make_keys(db)
    token, session = sessions.sign_in(db=db, secret=SECRET, key=k["uploader"])
    assert sessions.resume(db=db, secret=SECRET, token=token).principal == session.principal
    with pytest.raises(Unauthenticated, match="not one this server signed"):
        sessions.resume(db=db, secret=b"another secret", token=token)
    payload, _, signature = token.partition(".")
    with pytest.raises(Unauthenticated):
        sessions.resume(db=db, secret=SECRET, token=payload[:-1] + "A." + signature)
    later = time.time() + sessions.SESSION_SECONDS + 1
    with pytest.raises(Unauthenticated, match="expired"):
        sessions.resume(db=db, secret=SECRET, token=token, now=later)
    with pytest.raises(Forbidden):
        sessions.check_csrf(SECRET, session.nonce, sessions.csrf_token(SECRET, "other nonce"))
    sessions.check_csrf(SECRET, session.nonce, sessions.csrf_token(SECRET, session.nonce))


def test_generated_secret_is_kept_in_a_private_file(tmp_path, monkeypatch):
    from app.config import get_settings

    path = tmp_path / "session.key"
    monkeypatch.setenv("STACKLEDGER_SESSION_SECRET_FILE", str(path))
    monkeypatch.delenv("STACKLEDGER_SESSION_SECRET", raising=False)
    get_settings.cache_clear()
    try:
        first = sessions.load_secret()
        assert len(first) == 64 and sessions.load_secret() == first
        assert path.stat().st_mode & 0o777 == 0o600
    finally:
        get_settings.cache_clear()


def test_api_reads_with_a_session_but_never_writes(db):
    k = make_keys(db)
    c = page_client(db)
    sign_in(c, k["supervisor"])
    assert c.get("/api/v1/holds.csv").status_code == 200
    r = c.post("/api/v1/panels", json={"serial": "P1", "product": "X", "lot": "L"})
    assert r.status_code == 401  # a write needs the Bearer key: no CSRF hole in the API
