"""Catalogue of bad inputs, each sent both ways: as a POST and as a one-measurement CSV file.

Both must answer the same status with the same messages (only the locator differs: a JSON
pointer, or a file line and column), leave the store unchanged, and keep the refused upload with
its reason. A few cases exist in one form only (a body that is not JSON; a CSV header)."""

from __future__ import annotations

import io
import json
from collections.abc import Callable

import pytest
from sqlalchemy import func, select

from app.config import get_settings
from app.schemas.holds import DispositionCreate, HoldCreate
from app.services import holds, keys, rejections
from app.store.tables import Fit, Measurement, PanelEstimate, RejectedUpload, SiteSet
from tests.factories import client, make_keys, make_panel, make_product, measurement

HEADER = "panel,layer,side,frame,exposure_tool,measured_at,x_mm,y_mm,dx_um,dy_um"


def _good() -> dict:
    return measurement("P0001", 1, "A", (1.0, 2.0))


def _set(path: str, value: object) -> Callable[[], dict]:
    def make() -> dict:
        body = _good()
        target = body
        parts = path.split("/")
        for p in parts[:-1]:
            target = target[int(p)] if p.isdigit() else target[p]
        target[int(parts[-1]) if parts[-1].isdigit() else parts[-1]] = value
        return body
    return make


def _dup_sites() -> dict:
    body = _good()
    body["sites"][3] = dict(body["sites"][0])
    return body


def _n_sites(n: int) -> Callable[[], dict]:
    def make() -> dict:
        body = _good()
        body["sites"] = [{"x_mm": (i % 50) * 4.0 - 100, "y_mm": (i // 50) * 4.0 - 100,
                          "dx_um": 0.0, "dy_um": 0.0} for i in range(n)]
        return body
    return make


def _all_off_panel() -> dict:
    body = _good()
    for s in body["sites"]:
        s["x_mm"] += 600.0
    return body


# name: (measurement, expected status, a word the first message holds)
BOTH_WAYS = {
    "non-finite number": (_set("sites/1/dx_um", float("nan")), 422, "finite"),
    "infinite number": (_set("sites/2/dy_um", float("inf")), 422, "finite"),
    "displacement over 1 mm": (_set("sites/2/dx_um", 1500.0), 422, "1 mm"),
    "layer 0": (_set("layer", 0), 422, "layer must be 1..12"),
    "layer past the stack": (_set("layer", 13), 422, "layer must be 1..12"),
    "side C": (_set("side", "C"), 422, "side must be"),
    "frame unknown": (_set("frame", "wafer"), 422, "frame must be"),
    "unknown panel": (_set("panel", "NOPE-1"), 422, "not registered"),
    "scrapped panel": (_set("panel", "P0009"), 422, "scrapped"),
    "duplicate sites": (_dup_sites, 422, "more than once"),
    "2,001 sites": (_n_sites(2001), 422, "at most 2000"),
    "site off the panel": (_set("sites/0/x_mm", 400.0), 422, "outside"),
    "every site off the panel": (_all_off_panel, 422, "outside"),
    "time without zone": (_set("measured_at", "2026-11-02T06:00:00"), 422, "time zone"),
    "time that is not a time": (_set("measured_at", "yesterday"), 422, "time zone"),
    "exposure tool too long": (_set("exposure_tool", "T" * 65), 422, "exposure_tool must be"),
    "exposure tool with a control character": (_set("exposure_tool", "EXP\x01"), 422,
                                               "control"),
    "serial with NUL": (_set("panel", "P0001\x00"), 422, "NUL"),
    "metrology tool too long": (_set("metrology_tool", "M" * 65), 422, "metrology_tool"),
}

JSON_ONLY = {
    "no sites": (lambda: _set("sites", [])(), 422, "at least one site"),
    "missing field": (lambda: {k: v for k, v in _good().items() if k != "exposure_tool"}, 422,
                      "exposure_tool"),
    "not JSON": (lambda: b"{panel: P0001", 422, "JSON"),
    "layer beyond any integer": (lambda: _set("layer", 2**63)(), 422, "layer"),
}


def _csv(body: dict) -> bytes:
    extra = [k for k in ("metrology_tool", "recipe", "artwork", "shift") if k in body]
    lines = [",".join([HEADER, *extra])]
    for s in body["sites"]:
        head = [
            str(body[k])
            for k in ("panel", "layer", "side", "frame", "exposure_tool", "measured_at")
        ]
        site = [repr(float(s[k])) for k in ("x_mm", "y_mm", "dx_um", "dy_um")]
        lines.append(",".join(head + site + [str(body[k]) for k in extra]))
    return ("\n".join(lines) + "\n").encode()


@pytest.fixture
def setup(db):
    make_product(db)
    make_panel(db)
    make_panel(db, "P0009")
    c = client(db)
    k = make_keys(db)
    r = c.post("/api/v1/measurements", json=measurement("P0001", 1, "B", (1.0,)),
               headers=k.headers("uploader"))
    assert r.status_code == 201
    admin = keys.authenticate(db=db, authorization=f"Bearer {k['admin']}")
    hold = holds.place(db=db, serial="P0009", data=HoldCreate(reason="test scrap"),
                       principal=admin)
    holds.dispose(db=db, hold_id=hold.id, data=DispositionCreate(action="scrap", note="test"),
                  principal=admin)
    return db, c, k


def _snapshot(db) -> tuple:
    with db.transaction() as s:
        counts = tuple(int(s.scalar(select(func.count()).select_from(t)))
                       for t in (Measurement, SiteSet, Fit))
        st = s.get(PanelEstimate, "P0001")
        return (*counts, st.ftb_worst_um, st.updated_at)


def _post_json(c, k, raw: bytes):
    return c.post("/api/v1/measurements", content=raw,
                  headers={**k.headers("uploader"), "Content-Type": "application/json"})


def _post_csv(c, k, raw: bytes):
    return c.post("/api/v1/imports", files={"file": ("one.csv", io.BytesIO(raw), "text/csv")},
                  headers=k.headers("uploader"))


def _refused(db, r, status: int, needle: str, before: tuple, kept_before: int) -> dict:
    assert r.status_code == status, r.text
    assert r.headers["content-type"].startswith("application/problem+json")
    problem = r.json()
    assert {"type", "title", "status", "detail"} <= problem.keys()
    text = problem["detail"] + " ".join(e["message"] for e in problem.get("errors", []))
    assert needle.lower() in text.lower(), text
    assert _snapshot(db) == before
    assert rejections.count(db=db) == kept_before + 1
    kept = rejections.latest(db=db)
    assert kept.status == status and kept.key_label == "test uploader"
    return problem


@pytest.mark.parametrize("case", list(BOTH_WAYS))
def test_the_same_bad_measurement_gets_the_same_answer_both_ways(setup, case):
    db, c, k = setup
    make, status, needle = BOTH_WAYS[case]
    body = make()
    before, kept_before = _snapshot(db), rejections.count(db=db)
    posted = _refused(db, _post_json(c, k, json.dumps(body).encode()), status, needle,
                      before, kept_before)
    imported = _refused(db, _post_csv(c, k, _csv(body)), status, needle, before,
                        kept_before + 1)
    assert [e["message"] for e in posted["errors"]] == \
        [e["message"] for e in imported["errors"]]
    for e in imported["errors"]:
        assert e["line"] >= 2 and e["column"]
    for e in posted["errors"]:
        assert e["pointer"].startswith("/")


def test_problems_are_located_both_ways(setup):
    _db, c, k = setup
    body = _set("sites/2/dx_um", 1500.0)()
    assert _post_json(c, k, json.dumps(body).encode()).json()["errors"][0]["pointer"] == \
        "/sites/2/dx_um"
    error = _post_csv(c, k, _csv(body)).json()["errors"][0]
    assert (error["line"], error["column"]) == (4, "dx_um")  # header, sites 0 and 1, site 2


def test_every_site_off_the_panel_is_reported_once(setup):
    _db, c, k = setup
    body = _all_off_panel()
    for r in (_post_json(c, k, json.dumps(body).encode()), _post_csv(c, k, _csv(body))):
        assert len(r.json()["errors"]) == len(body["sites"])


@pytest.mark.parametrize("case", list(JSON_ONLY))
def test_bad_body_is_refused_and_kept(setup, case):
    db, c, k = setup
    make, status, needle = JSON_ONLY[case]
    body = make()
    raw = body if isinstance(body, bytes) else json.dumps(body).encode()
    before, kept_before = _snapshot(db), rejections.count(db=db)
    _refused(db, _post_json(c, k, raw), status, needle, before, kept_before)
    assert rejections.latest(db=db).body == raw


def test_body_over_the_size_limit(setup, monkeypatch):
    db, c, k = setup
    monkeypatch.setenv("STACKLEDGER_MAX_BODY_BYTES", "2000")
    get_settings.cache_clear()
    before = _snapshot(db)
    r = _post_json(c, k, json.dumps(_n_sites(200)()).encode())
    assert r.status_code == 413
    assert "2000 bytes" in r.json()["detail"]
    assert _snapshot(db) == before
    kept = rejections.latest(db=db)
    assert kept.status == 413 and "truncated" in kept.reason
    get_settings.cache_clear()


def test_unknown_product_when_registering_a_panel(setup):
    db, c, k = setup
    r = c.post("/api/v1/panels", json={"serial": "P9", "product": "NOPE", "lot": "L"},
               headers=k.headers("uploader"))
    assert r.status_code == 404
    assert "NOPE" in r.json()["detail"]
    with db.transaction() as s:
        assert s.scalars(select(RejectedUpload).where(
            RejectedUpload.endpoint == "/api/v1/panels")).one().status == 404
