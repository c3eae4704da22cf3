"""Catalogue of bad inputs: each gets a clear 4xx problem document, the store is unchanged and
the refused upload is kept with its reason."""

from __future__ import annotations

import copy
import json

import pytest
from sqlalchemy import func, select

from app.config import get_settings
from app.services import rejections
from app.store.tables import Fit, Measurement, PanelState, RejectedUpload, Site
from tests.factories import client, make_keys, make_panel, make_product, measurement

GOOD = measurement("P0001", 1, "A", (1.0, 2.0))


def _with(path: str, value: object) -> dict:
    body = copy.deepcopy(GOOD)
    target = body
    parts = path.split("/")
    for p in parts[:-1]:
        target = target[int(p)] if p.isdigit() else target[p]
    last = parts[-1]
    if value is _DELETE:
        del target[last]
    elif last.isdigit():
        target[int(last)] = value
    else:
        target[last] = value
    return body


_DELETE = object()


def _raw_nan() -> bytes:
    text = json.dumps(GOOD)
    return text.replace('"dx_um": 1.0', '"dx_um": NaN', 1).encode()


def _dup_sites() -> dict:
    body = copy.deepcopy(GOOD)
    body["sites"][3] = dict(body["sites"][0])
    return body


def _sites(n: int) -> dict:
    body = copy.deepcopy(GOOD)
    body["sites"] = [{"x_mm": (i % 50) * 4.0 - 100, "y_mm": (i // 50) * 4.0 - 100,
                      "dx_um": 0.0, "dy_um": 0.0} for i in range(n)]
    return body


CASES = {
    "non-finite number": (lambda: _raw_nan(), 422, "finite"),
    "infinite number": (lambda: json.dumps(GOOD).replace('"dy_um": 2.0', '"dy_um": Infinity', 1)
                        .encode(), 422, "finite"),
    "displacement over 1 mm": (lambda: _with("sites/2/dx_um", 1500.0), 422, "1 mm"),
    "layer 0": (lambda: _with("layer", 0), 422, "layer must be 1..12"),
    "layer past the stack": (lambda: _with("layer", 13), 422, "layer must be 1..12"),
    "side C": (lambda: _with("side", "C"), 422, "side"),
    "unknown panel": (lambda: _with("panel", "NOPE-1"), 422, "not registered"),
    "duplicate sites": (_dup_sites, 422, "more than once"),
    "no sites": (lambda: _with("sites", []), 422, "at least one site"),
    "2,001 sites": (lambda: _sites(2001), 422, "at most 2000"),
    "site off the panel": (lambda: _with("sites/0/x_mm", 400.0), 422, "outside"),
    "time without zone": (lambda: _with("measured_at", "2026-11-02T06:00:00"), 422, "timezone"),
    "missing field": (lambda: _with("tool", _DELETE), 422, "tool"),
    "not JSON": (lambda: b"{panel: P0001", 422, "JSON"),
}


@pytest.fixture
def setup(db):
    make_product(db)
    make_panel(db)
    c = client(db)
    k = make_keys(db)
    r = c.post("/api/v1/measurements", json=measurement("P0001", 1, "B", (1.0,)),
               headers=k.headers("tool"))
    assert r.status_code == 201
    return db, c, k


def _snapshot(db) -> tuple:
    with db.transaction() as s:
        counts = tuple(int(s.scalar(select(func.count()).select_from(t)))
                       for t in (Measurement, Site, Fit))
        st = s.get(PanelState, "P0001")
        return (*counts, st.ftb_worst_um, st.updated_at)


@pytest.mark.parametrize("case", list(CASES))
def test_bad_measurement_is_refused_and_kept(setup, case):
    db, c, k = setup
    make_body, status, needle = CASES[case]
    body = make_body()
    raw = body if isinstance(body, bytes) else json.dumps(body).encode()
    before = _snapshot(db)
    kept_before = rejections.count(db=db)
    r = c.post("/api/v1/measurements", content=raw,
               headers={**k.headers("tool"), "Content-Type": "application/json"})
    assert r.status_code == status, r.text
    problem = r.json()
    assert r.headers["content-type"].startswith("application/problem+json")
    assert {"type", "title", "status", "detail"} <= problem.keys()
    text = problem["detail"] + " ".join(e["message"] + e.get("pointer", "")
                                        for e in problem.get("errors", []))
    assert needle.lower() in text.lower(), text
    assert _snapshot(db) == before
    assert rejections.count(db=db) == kept_before + 1
    kept = rejections.latest(db=db)
    assert kept.body == raw
    assert kept.status == status
    assert kept.key_label == "test tool"


def test_body_over_the_size_limit(setup, monkeypatch):
    db, c, k = setup
    monkeypatch.setenv("STACKLEDGER_MAX_BODY_BYTES", "2000")
    get_settings.cache_clear()
    before = _snapshot(db)
    r = c.post("/api/v1/measurements", content=json.dumps(_sites(200)).encode(),
               headers={**k.headers("tool"), "Content-Type": "application/json"})
    assert r.status_code == 413
    assert "2000 bytes" in r.json()["detail"]
    assert _snapshot(db) == before
    kept = rejections.latest(db=db)
    assert kept.status == 413 and "truncated" in kept.reason
    get_settings.cache_clear()


def test_unknown_product_when_registering_a_panel(setup):
    db, c, k = setup
    r = c.post("/api/v1/panels", json={"serial": "P9", "product": "NOPE", "lot": "L"},
               headers=k.headers("tool"))
    assert r.status_code == 404
    assert "NOPE" in r.json()["detail"]
    with db.transaction() as s:
        assert s.scalars(select(RejectedUpload).where(
            RejectedUpload.endpoint == "/api/v1/panels")).one().status == 404


def test_problem_errors_say_where(setup):
    _db, c, k = setup
    r = c.post("/api/v1/measurements", json=_with("sites/2/dx_um", 1500.0),
               headers=k.headers("tool"))
    assert r.json()["errors"][0]["pointer"] == "/sites/2/dx_um"
