"""Reads never queue behind a writer (SQLite WAL with deferred BEGIN for reads)."""

from __future__ import annotations

import threading

from app.services import products
from tests.factories import make_product


def test_a_read_goes_through_while_a_write_is_open(db):
    make_product(db)
    holding, release = threading.Event(), threading.Event()

    def writer() -> None:
        with db.transaction() as session:
            session.connection()  # the write transaction (and on SQLite its lock) is open
            holding.set()
            release.wait(20)

    t = threading.Thread(target=writer)
    t.start()
    try:
        assert holding.wait(10)
        # With BEGIN IMMEDIATE for reads too, this would wait out the 30 s busy timeout.
        assert products.get(db=db, code="TESTPROD").code == "TESTPROD"
    finally:
        release.set()
        t.join()
