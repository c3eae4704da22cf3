"""CSV import: all or nothing per file, per-row errors, supersede, the same fits as the API."""

from __future__ import annotations

import io

import numpy as np
import pytest
from sqlalchemy import func, select

from app.services import rejections
from app.store.tables import Measurement, SiteSet
from tests.factories import client, make_keys, make_panel, make_product, measurement

HEADER = "panel,layer,side,frame,exposure_tool,measured_at,x_mm,y_mm,dx_um,dy_um\n"


def _csv(*measurements: dict) -> str:
    lines = [HEADER]
    for m in measurements:
        for s in m["sites"]:
            lines.append(f"{m['panel']},{m['layer']},{m['side']},{m['frame']},{m['exposure_tool']},"
                         f"{m['measured_at']},{s['x_mm']},{s['y_mm']},{s['dx_um']},{s['dy_um']}\n")
    return "".join(lines)


@pytest.fixture
def setup(db):
    make_product(db)
    make_panel(db, "P0001")
    make_panel(db, "P0002")
    return db, client(db), make_keys(db)


def _post(c, k, text: str | bytes, name: str = "m.csv"):
    data = text.encode() if isinstance(text, str) else text
    return c.post("/api/v1/imports", files={"file": (name, io.BytesIO(data), "text/csv")},
                  headers=k.headers("uploader"))


def _count(db, table) -> int:
    with db.transaction() as s:
        return int(s.scalar(select(func.count()).select_from(table)))


def test_import_groups_fits_and_updates_state_like_the_api(setup):
    db, c, k = setup
    rows = [measurement("P0001", 1, "A", (2.0, 1.0, 0.001), noise=0.3, seed=1),
            measurement("P0001", 1, "B", (3.0, -1.0), noise=0.3, seed=2),
            measurement("P0002", 1, "A", (1.0,), noise=0.3, seed=3)]
    r = _post(c, k, _csv(*rows))
    assert r.status_code == 201, r.text
    assert r.json() == {"file": "m.csv", "rows": 75, "measurements": 3, "panels": 2,
                        "superseded": 0}
    imported = c.get("/api/v1/panels/P0001", headers=k.headers("engineer")).json()
    # The same measurements posted one by one to a second panel give the same FTB.
    make_panel(db, "P0003")
    for m in rows[:2]:
        c.post("/api/v1/measurements", json={**m, "panel": "P0003"}, headers=k.headers("uploader"))
    posted = c.get("/api/v1/panels/P0003", headers=k.headers("engineer")).json()
    got = np.array([[p["dx_um"], p["dy_um"]] for p in imported["ftb_current_points"]])
    want = np.array([[p["dx_um"], p["dy_um"]] for p in posted["ftb_current_points"]])
    np.testing.assert_allclose(got, want, atol=1e-6)  # CSV text keeps ~1e-12 relative


def test_import_supersedes_within_the_file_and_the_store(setup):
    db, c, k = setup
    c.post("/api/v1/measurements", json=measurement("P0001", 1, "A", (9.0,)),
           headers=k.headers("uploader"))
    text = _csv(measurement("P0001", 1, "A", (5.0,), minutes=900),
                measurement("P0001", 1, "A", (1.0,), minutes=960))
    r = _post(c, k, text)
    assert r.status_code == 201, r.text
    assert r.json()["superseded"] == 2
    assert _count(db, Measurement) == 3
    state = c.get("/api/v1/panels/P0001", headers=k.headers("engineer")).json()
    assert state["ftb_current_um"] == pytest.approx(1.0, abs=1e-6)


BAD_ROWS = {
    "non-finite": (
        "P0001,1,A,facing_side,EXP-T1,2026-11-02T06:00:00Z,0,0,nan,1\n",
        "dx_um",
        "finite",
    ),
    "text in a number": (
        "P0001,1,A,facing_side,EXP-T1,2026-11-02T06:00:00Z,0,abc,1,1\n",
        "y_mm",
        "'abc' is not a number",
    ),
    "side C": ("P0001,1,C,facing_side,EXP-T1,2026-11-02T06:00:00Z,0,0,1,1\n", "side", "side"),
    "layer 0": ("P0001,0,A,facing_side,EXP-T1,2026-11-02T06:00:00Z,0,0,1,1\n", "layer", "1..12"),
    "layer 13": ("P0001,13,A,facing_side,EXP-T1,2026-11-02T06:00:00Z,0,0,1,1\n", "layer", "1..12"),
    "layer beyond any integer": (
        "P0001,9223372036854775808,A,facing_side,EXP-T1,2026-11-02T06:00:00Z,0,0,1,1\n",
        "layer",
        "not a whole layer number",
    ),
    "over 1 mm": (
        "P0001,1,A,facing_side,EXP-T1,2026-11-02T06:00:00Z,0,0,1200,1\n",
        "dx_um",
        "1 mm",
    ),
    "unknown panel": (
        "NOPE,1,A,facing_side,EXP-T1,2026-11-02T06:00:00Z,0,0,1,1\n",
        "panel",
        "not registered",
    ),
    "no zone": (
        "P0001,1,A,facing_side,EXP-T1,2026-11-02T06:00:00,0,0,1,1\n",
        "measured_at",
        "time zone",
    ),
    "bad frame": ("P0001,1,A,wafer,EXP-T1,2026-11-02T06:00:00Z,0,0,1,1\n", "frame", "frame"),
}


@pytest.mark.parametrize("case", list(BAD_ROWS))
def test_one_bad_row_refuses_the_whole_file(setup, case):
    db, c, k = setup
    line, column, needle = BAD_ROWS[case]
    good = _csv(measurement("P0002", 1, "A", (1.0,)))
    text = good + line  # file line 27 (the header is line 1)
    before = (_count(db, Measurement), _count(db, SiteSet))
    r = _post(c, k, text)
    assert r.status_code == 422, r.text
    errors = r.json()["errors"]
    assert errors[0]["line"] == 27 and errors[0]["column"] == column
    assert needle in errors[0]["message"]
    assert (_count(db, Measurement), _count(db, SiteSet)) == before
    kept = rejections.latest(db=db)
    assert kept.endpoint == "/api/v1/imports" and kept.status == 422
    assert text.encode() in kept.body  # the multipart body holds the file whole


def test_duplicate_sites_and_split_measurements_are_reported(setup):
    _db, c, k = setup
    m = measurement("P0001", 1, "A", (1.0,))
    text = _csv(m) + _csv(measurement("P0002", 1, "A"))[len(HEADER):] + _csv(m)[len(HEADER):]
    r = _post(c, k, text)
    assert r.status_code == 422
    messages = " ".join(e["message"] for e in r.json()["errors"])
    assert "not next to these" in messages


def test_wrong_header_and_non_utf8_and_empty(setup):
    db, c, k = setup
    r = _post(c, k, "panel,layer,side,tool,when,x,y,dx,dy\nP0001,1,A,T,t,0,0,0,0\n")
    assert r.status_code == 422
    assert "wrong CSV header" in r.json()["detail"] and "missing frame" in r.json()["detail"]
    r = _post(c, k, HEADER.encode() + "P0001,1,A,facing_side,\u00c9X,2026-11-02T06:00:00Z,0,0,1,1\n"
              .encode("latin-1"))
    assert r.status_code == 422
    assert "not UTF-8" in r.json()["detail"]
    r = _post(c, k, HEADER)
    assert r.status_code == 422 and "no rows" in r.json()["detail"]
    assert rejections.count(db=db) == 3


def test_import_over_several_chunks(setup, monkeypatch):
    from app.config import get_settings

    _db, c, k = setup
    monkeypatch.setenv("STACKLEDGER_IMPORT_CHUNK_ROWS", "7")  # measurements span chunk edges
    get_settings.cache_clear()
    rows = [measurement("P0001", layer, side, (1.0, 0.5), noise=0.2, seed=layer)
            for layer in range(1, 4) for side in "AB"]
    r = _post(c, k, _csv(*rows))
    assert r.status_code == 201, r.text
    assert r.json()["measurements"] == 6 and r.json()["rows"] == 150
    state = c.get("/api/v1/panels/P0001", headers=k.headers("engineer")).json()
    assert state["layers_reached"] == {"A": 3, "B": 3}
    get_settings.cache_clear()
