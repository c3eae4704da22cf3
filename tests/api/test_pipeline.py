"""The one pipeline: posts and imports give the same stored result, a file is applied once,
the write lock is not held while a batch is checked and fitted, and the history cache follows
the product's history revision."""

from __future__ import annotations

import io
import threading

import numpy as np
import pytest
from sqlalchemy import func, select

from app.services import intake
from app.store.tables import Measurement, Panel, Product
from tests.factories import client, make_keys, make_panel, make_product, measurement

HEADER = "panel,layer,side,frame,exposure_tool,measured_at,x_mm,y_mm,dx_um,dy_um"


def _csv(*ms: dict) -> bytes:
    lines = [HEADER]
    for m in ms:
        head = ",".join(str(m[k]) for k in ("panel", "layer", "side", "frame", "exposure_tool",
                                              "measured_at"))
        lines += [f"{head},{s['x_mm']!r},{s['y_mm']!r},{s['dx_um']!r},{s['dy_um']!r}"
                  for s in m["sites"]]
    return ("\n".join(lines) + "\n").encode()


def _import(c, k, data: bytes, key: str | None = None):
    headers = k.headers("uploader") | ({"Idempotency-Key": key} if key else {})
    return c.post("/api/v1/imports", files={"file": ("f.csv", io.BytesIO(data), "text/csv")},
                  headers=headers)


def _count(db) -> int:
    with db.reading() as s:
        return int(s.scalar(select(func.count()).select_from(Measurement)))


@pytest.fixture
def setup(db):
    make_product(db, layers_per_side=2)
    for serial in ("P1", "P2", "Q1", "Q2"):
        make_panel(db, serial)
    return db, client(db), make_keys(db)


def _layers(serial: str, seed: int) -> list[dict]:
    rng = np.random.default_rng(seed)
    return [measurement(serial, layer, side, (*tuple(rng.normal(0, 2, 2)), 0.002),
                        noise=0.5, seed=seed + layer)
            for layer in (1, 2) for side in "AB"]


def test_the_same_data_posted_or_imported_gives_the_same_forecast(setup):
    _db, c, k = setup
    # P1 completes its stack and becomes the product's history for the panels after it.
    for m in _layers("P1", 1):
        assert c.post("/api/v1/measurements", json=m, headers=k.headers("uploader")).status_code \
            == 201
    first_three = [{**m, "panel": "P2"} for m in _layers("X", 7)[:3]]
    for m in first_three:
        r = c.post("/api/v1/measurements", json=m, headers=k.headers("uploader"))
        assert r.status_code == 201
    posted = c.get("/api/v1/panels/P2", headers=k.headers("engineer")).json()
    # The same three measurements again, as a file: they supersede the posted ones with the
    # same values, so the panel's data is what it was; its forecast must be the same, to the
    # last digit (same fits, same history, same seeded samples).
    r = _import(c, k, _csv(*first_three))
    assert r.status_code == 201 and r.json()["superseded"] == 3
    imported = c.get("/api/v1/panels/P2", headers=k.headers("engineer")).json()
    assert posted["forecast"] is not None
    assert imported["forecast"] == posted["forecast"]
    assert (
        imported["ftb_current_points"] == posted["ftb_current_points"]
        and imported["reasons"] == posted["reasons"]
    )


def test_a_file_is_applied_once_and_a_key_cannot_be_reused(setup):
    db, c, k = setup
    data = _csv(*_layers("P1", 2)[:2])
    first = _import(c, k, data)
    assert first.status_code == 201
    count = _count(db)
    again = _import(c, k, data)
    assert again.status_code == 200 and again.json() == first.json()
    assert _count(db) == count  # not applied a second time
    keyed = _import(c, k, _csv(*_layers("P2", 3)[:1]), key="file-7")
    assert keyed.status_code == 201
    other = _import(c, k, _csv(*_layers("Q1", 4)[:1]), key="file-7")
    assert other.status_code == 422 and "different body" in other.json()["detail"]


def test_the_write_lock_is_not_held_while_a_batch_is_prepared(setup, monkeypatch):
    """An import paused inside prepare (after its checks and fits) must not keep a post out."""
    _db, c, k = setup
    entered, release = threading.Event(), threading.Event()
    real_estimate = intake._estimate

    def paused(plan, serials, layers):
        real_estimate(plan, serials, layers)
        if "Q1" in plan.batch.panel:
            entered.set()
            assert release.wait(30)

    monkeypatch.setattr(intake, "_estimate", paused)
    result: dict = {}
    worker = threading.Thread(target=lambda: result.setdefault(
        "import", _import(c, k, _csv(*_layers("Q1", 5)))))
    worker.start()
    assert entered.wait(30)
    try:
        posted = c.post("/api/v1/measurements", json=_layers("P1", 6)[0],
                        headers=k.headers("uploader"))
        assert posted.status_code == 201  # answered while the import is still being prepared
    finally:
        release.set()
        worker.join(30)
    assert result["import"].status_code == 201


def test_completing_a_panel_bumps_the_history_revision(setup):
    db, c, k = setup

    def revision() -> int:
        with db.reading() as s:
            return s.scalars(select(Product.history_revision)).one()

    before = revision()
    ms = _layers("P1", 8)
    c.post("/api/v1/measurements", json=ms[0], headers=k.headers("uploader"))
    assert revision() == before + 1  # the product's first write sets its history cut-off
    for m in ms[1:-1]:
        c.post("/api/v1/measurements", json=m, headers=k.headers("uploader"))
    assert revision() == before + 1  # in process, cut-off fresh: what is learned is the same
    c.post("/api/v1/measurements", json=ms[-1], headers=k.headers("uploader"))
    assert revision() == before + 2
    with db.reading() as s:
        assert s.get(Panel, "P1").completed_at is not None
    c.post("/api/v1/measurements", json={**ms[0], "measured_at": "2026-11-03T06:00:00Z"},
           headers=k.headers("uploader"))  # a re-measurement of a completed panel
    assert revision() == before + 3
    misses = db.history.misses
    c.post("/api/v1/measurements", json=_layers("P2", 9)[0], headers=k.headers("uploader"))
    c.post("/api/v1/measurements", json=_layers("P2", 9)[1], headers=k.headers("uploader"))
    assert db.history.misses == misses + 1  # learned once for the new revision, then reused


def test_a_stale_cut_off_is_refreshed_by_the_next_write(setup, monkeypatch):
    db, c, k = setup
    from app.config import get_settings

    def cut_off():
        with db.reading() as s:
            return s.scalars(select(Product.history_at)).one()

    c.post("/api/v1/measurements", json=_layers("P1", 10)[0], headers=k.headers("uploader"))
    first = cut_off()
    c.post("/api/v1/measurements", json=_layers("P1", 10)[1], headers=k.headers("uploader"))
    assert cut_off() == first
    monkeypatch.setenv("STACKLEDGER_HISTORY_REFRESH_S", "0")
    get_settings.cache_clear()
    c.post("/api/v1/measurements", json=_layers("P1", 10)[2], headers=k.headers("uploader"))
    assert cut_off() > first
    get_settings.cache_clear()
