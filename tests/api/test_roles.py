"""Role matrix: every endpoint and every role, plus no key and a revoked key."""

from __future__ import annotations

import pytest

from app.main import create_app
from app.services import keys
from tests.factories import client, make_keys, make_panel, make_product, measurement

ALL = {"uploader", "engineer", "supervisor", "admin"}
READERS = {"engineer", "supervisor", "admin"}

# (method, path, allowed roles, body factory)
MATRIX = [
    ("POST", "/api/v1/products", {"admin"},
     lambda: {"code": "NEWP", "layers_per_side": 4, "flip_axis": "x", "panel_width_mm": 500,
              "panel_height_mm": 500, "ftb_limit_um": 50, "l2l_limit_um": 12}),
    ("GET", "/api/v1/products", ALL, None),
    ("GET", "/api/v1/products/TESTPROD", ALL, None),
    ("POST", "/api/v1/panels", ALL, lambda: {"serial": "P0001", "product": "TESTPROD",
                                             "lot": "LOT1"}),
    ("GET", "/api/v1/panels", READERS, None),
    ("GET", "/api/v1/panels/P0001", READERS, None),
    ("GET", "/api/v1/panels/P0001/stack", READERS, None),
    ("GET", "/api/v1/panels/P0001/sites", READERS, None),
    ("POST", "/api/v1/panels/P0001/holds", READERS, lambda: {"reason": "checking the matrix"}),
    ("POST", "/api/v1/measurements", {"uploader", "admin"},
     lambda: measurement("P0001", 1, "A", (1.0,))),
    ("POST", "/api/v1/imports", {"uploader", "admin"}, "csv"),
    ("GET", "/api/v1/holds", READERS, None),
    ("GET", "/api/v1/holds.csv", READERS, None),
    ("POST", "/api/v1/holds/{hold}/disposition", {"supervisor", "admin"},
     lambda: {"action": "release", "note": "matrix check"}),
    ("GET", "/metrics", ALL, None),
    ("GET", "/api/v1/analysis/fingerprints?product=TESTPROD", READERS, None),
    ("GET", "/api/v1/analysis/shares?product=TESTPROD", READERS, None),
    ("GET", "/api/v1/analysis/drift?product=TESTPROD", READERS, None),
    ("GET", "/api/v1/analysis/lots?product=TESTPROD", READERS, None),
    ("GET", "/api/v1/analysis/trend?product=TESTPROD", READERS, None),
    ("GET", "/api/v1/analysis/vectors/P0001/A/1", READERS, None),
    ("GET", "/api/v1/audit", READERS, None),
    ("GET", "/api/v1/rejected-uploads", ALL, None),
]
CSV = ("panel,layer,side,frame,exposure_tool,measured_at,x_mm,y_mm,dx_um,dy_um\n"
       "P0001,2,A,facing_side,EXP-T1,2026-11-02T08:00:00Z,0,0,1,1\n")


def _call(c, method, path, role_headers, body):
    if body == "csv":
        return c.post(path, files={"file": ("m.csv", CSV, "text/csv")}, headers=role_headers)
    if method == "GET":
        return c.get(path, headers=role_headers)
    return c.post(path, json=body(), headers=role_headers)


def test_matrix_covers_every_route():
    paths = create_app().openapi()["paths"]
    routes = {(m.upper(), path) for path, ops in paths.items() for m in ops}
    covered = {(m, p.split("?")[0].replace("{hold}", "{hold_id}").replace("TESTPROD", "{code}")
                .replace("P0001/A/1", "{serial}/{side}/{layer}")
                .replace("P0001", "{serial}")) for m, p, _, _ in MATRIX}
    covered.add(("GET", "/api/v1/health"))
    assert routes == covered


@pytest.mark.parametrize("method,path,allowed,body", MATRIX,
                         ids=[f"{m} {p}" for m, p, *_ in MATRIX])
def test_role_matrix(db, method, path, allowed, body):
    make_product(db)
    make_panel(db)
    k = make_keys(db)
    c = client(db)
    if "{hold}" in path:
        hold = c.post("/api/v1/panels/P0001/holds", json={"reason": "for the matrix"},
                      headers=k.headers("engineer")).json()
        path = path.replace("{hold}", hold["id"])
    r = _call(c, method, path, {}, body or (lambda: None))
    assert r.status_code == 401, "no key must be refused"
    for role in sorted(ALL):
        r = _call(c, method, path, k.headers(role), body or (lambda: None))
        if role in allowed:
            assert r.status_code not in (401, 403), (role, r.text)
        else:
            assert r.status_code == 403, (role, r.status_code)
            assert role in r.json()["detail"]


def test_health_needs_no_key(db):
    r = client(db).get("/api/v1/health")
    assert r.status_code == 200
    assert r.json() == {"status": "ok", "database": "ok"}


def test_revoked_key_is_refused_and_keys_are_stored_hashed(db):
    make_product(db)
    k = make_keys(db)
    c = client(db)
    assert c.get("/api/v1/products/TESTPROD", headers=k.headers("uploader")).status_code == 200
    prefix = k["uploader"].split("_")[1]
    keys.revoke(db=db, prefix=prefix)
    assert c.get("/api/v1/products/TESTPROD", headers=k.headers("uploader")).status_code == 401
    from sqlalchemy import select

    from app.store.tables import ApiKey

    with db.transaction() as s:
        stored = s.scalars(select(ApiKey)).all()
    for row in stored:
        assert all(row.sha256 != v and v not in (row.sha256, row.prefix, row.label)
                   for v in k.values())
        assert len(row.sha256) == 64


def test_metrics_exposition(db):
    k = make_keys(db)
    c = client(db)
    c.get("/api/v1/health")
    r = c.get("/metrics", headers=k.headers("uploader"))
    assert r.status_code == 200
    assert "# TYPE stackledger_http_requests_total counter" in r.text
    assert "stackledger_open_holds 0" in r.text
