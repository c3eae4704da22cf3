"""Fixtures for the real-browser tests: a live server in a thread and Debian's chromium.

The browser is Debian's ``/usr/bin/chromium`` driven by Playwright; no browser is ever
downloaded. Where it is missing the browser tests are skipped locally but fail under CI (CI is
set), because .ci/run installs it.
"""

from __future__ import annotations

import os
import socket
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import pytest
import uvicorn

from app.config import get_settings
from app.db import Database
from app.main import create_app
from app.services import keys
from app.store.migrate import upgrade
from tests.factories import make_panel, make_product

CHROMIUM = Path("/usr/bin/chromium")
CHROMIUM_ARGS = [
    "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
    "--disable-background-networking", "--disable-component-update", "--disable-sync",
]
HOST = "127.0.0.1"


def _unavailable(reason: str) -> None:
    if os.environ.get("CI"):
        pytest.fail(f"{reason} under CI (.ci/run installs chromium)")
    pytest.skip(reason)


@dataclass(frozen=True)
class LiveServer:
    url: str
    product: str
    serial: str
    engineer_key: str


@contextmanager
def serving(db: Database, secret: bytes | None = None) -> Iterator[str]:
    """The app on ``db`` under uvicorn in a thread on a free port of 127.0.0.1; yields its URL."""
    app = create_app(db)
    if secret is not None:
        app.state.session_secret = secret
    sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    sock.bind((HOST, 0))  # a free port, held from here on: no race with other processes
    port = sock.getsockname()[1]
    config = uvicorn.Config(app, host=HOST, port=port, log_level="warning",
                            access_log=False, lifespan="on")
    server = uvicorn.Server(config)
    thread = threading.Thread(target=server.run, kwargs={"sockets": [sock]},
                              name="uvicorn-browser-test", daemon=True)
    thread.start()
    deadline = time.monotonic() + 10
    while not server.started:
        if not thread.is_alive() or time.monotonic() > deadline:
            server.should_exit = True
            sock.close()
            pytest.fail("uvicorn did not start within 10 s")
        time.sleep(0.02)
    try:
        yield f"http://{HOST}:{port}"
    finally:
        server.should_exit = True
        thread.join(timeout=10)
        sock.close()
        assert not thread.is_alive(), "uvicorn did not shut down within 10 s"


@pytest.fixture(scope="module")
def live_server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[LiveServer]:
    """The app under uvicorn on 127.0.0.1, on a migrated SQLite file with a product, a panel
    and an engineer key registered through the services."""
    get_settings.cache_clear()
    path = tmp_path_factory.mktemp("browser") / "store.db"
    db = Database(f"sqlite:///{path}")
    upgrade(db.engine)
    product = make_product(db)
    serial = make_panel(db, serial="BRW-0001", product=product)
    key, _prefix = keys.create(db=db, role="engineer", label="browser test")
    try:
        with serving(db) as url:
            yield LiveServer(url=url, product=product, serial=serial, engineer_key=key)
    finally:
        db.close()


@pytest.fixture(scope="session")
def browser() -> Iterator[Any]:
    if not (CHROMIUM.is_file() and os.access(CHROMIUM, os.X_OK)):
        _unavailable(f"{CHROMIUM} is missing")
    try:
        from playwright.sync_api import sync_playwright
    except ImportError:
        _unavailable("playwright for Python is not installed")
    with sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(CHROMIUM), headless=True,
                                    args=CHROMIUM_ARGS)
        try:
            yield browser
        finally:
            browser.close()


@pytest.fixture
def page(browser: Any) -> Iterator[Any]:
    context = browser.new_context(viewport={"width": 1280, "height": 900})
    context.set_default_timeout(10_000)
    page = context.new_page()
    try:
        yield page
    finally:
        context.close()


@dataclass(frozen=True)
class DemoServer:
    url: str
    db: Database
    keys: dict[str, str]
    database: str


@pytest.fixture(scope="module", params=["sqlite", "postgresql"])
def demo_server(request: pytest.FixtureRequest,
                tmp_path_factory: pytest.TempPathFactory) -> Iterator[DemoServer]:
    """The demo scenario (sample_data/) loaded through the services into a store on each
    database, served on 127.0.0.1, with one demo key per role."""
    from sqlalchemy import text

    from app.demo.loader import load_into
    from app.store.tables import Base

    get_settings.cache_clear()
    if request.param == "sqlite":
        db = Database(f"sqlite:///{tmp_path_factory.mktemp('demo') / 'demo.db'}")
        upgrade(db.engine)
    else:
        db = Database(request.getfixturevalue("pg_url"))
        tables = ", ".join(f'"{t.name}"' for t in reversed(Base.metadata.sorted_tables))
        with db.engine.begin() as conn:
            conn.execute(text(f"TRUNCATE {tables} RESTART IDENTITY CASCADE"))
    demo_keys = load_into(db)
    try:
        with serving(db, secret=b"browser-test-secret") as url:
            yield DemoServer(url=url, db=db, keys=demo_keys, database=request.param)
    finally:
        db.close()
