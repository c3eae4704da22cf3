"""The list pages: panels (filters, sort), the audit trail, the refused uploads."""

from __future__ import annotations

import re

from tests.factories import client, make_keys, make_panel, make_product, measurement
from tests.pages.helpers import page_client, sign_in

ROWS = re.compile(r'<tr data-panel="([^"]+)"')


def test_panels_filter_and_sort(db):
    make_product(db)
    k = make_keys(db)
    api = client(db)
    for i, tx in enumerate((2.0, 9.0, 5.0), 1):
        make_panel(db, f"P000{i}", lot="LOTA" if i < 3 else "LOTB")
        api.post("/api/v1/measurements", json=measurement(f"P000{i}", 1, "A", (tx,)),
                 headers=k.headers("uploader"))
    c = page_client(db)
    sign_in(c, k["engineer"])
    assert ROWS.findall(c.get("/panels?sort=ftb_current&order=desc").text) == ["P0002", "P0003",
                                                                       "P0001"]
    assert ROWS.findall(c.get("/panels?sort=serial&order=asc").text) == ["P0001", "P0002",
                                                                         "P0003"]
    assert ROWS.findall(c.get("/panels?lot=LOTB").text) == ["P0003"]
    risk = api.get("/api/v1/panels/P0001", headers=k.headers("engineer")).json()["risk"]
    same = api.get(f"/api/v1/panels?risk={risk}", headers=k.headers("engineer")).json()
    assert ROWS.findall(c.get(f"/panels?risk={risk}&sort=serial&order=asc").text) == [
        p["serial"] for p in same["items"]]
    assert "P0001" in ROWS.findall(c.get(f"/panels?risk={risk}").text)
    assert c.get("/panels?risk=bogus").status_code == 422
    assert c.get("/panels?sort=bogus").status_code == 422


def test_rejected_uploads_page_shows_own_or_all(db):
    make_product(db)
    k = make_keys(db)
    api = client(db)
    bad = {"serial": "B/AD", "product": "TESTPROD", "lot": "L"}
    api.post("/api/v1/panels", json=bad, headers=k.headers("uploader"))
    api.post("/api/v1/panels", json=bad, headers=k.headers("engineer"))
    tool = page_client(db)
    sign_in(tool, k["uploader"])
    text = tool.get("/rejected-uploads").text
    assert "test uploader" in text and "test engineer" not in text and "B/AD" in text
    assert tool.get("/audit").status_code == 403  # a tool key does not read the audit trail
    assert tool.get("/board").status_code == 403
    admin = page_client(db)
    sign_in(admin, k["admin"])
    text = admin.get("/rejected-uploads").text
    assert "test uploader" in text and "test engineer" in text


def test_audit_page_filters(db):
    make_product(db)
    make_panel(db, "P0001")
    make_panel(db, "P0002")
    k = make_keys(db)
    c = page_client(db)
    sign_in(c, k["engineer"])
    text = c.get("/audit?panel=P0002").text
    assert "P0002" in text and "/panels/P0001" not in text
    assert c.get("/audit?since=2026-01-01T00:00").status_code == 200
    assert c.get("/audit?since=soon").status_code == 422


def test_nul_characters_are_refused_not_failed(db):
    """PostgreSQL cannot compare a NUL: every page and the hold-list filters say so (422)."""
    make_product(db)
    make_panel(db)
    k = make_keys(db)
    c = page_client(db)
    csrf = sign_in(c, k["supervisor"])
    for path in ("/board?product=a%00", "/board?rule=%00", "/panels?lot=a%00",
                 "/audit?actor=a%00", "/panels/P%00", "/panels/P0001?map=A%00"):
        r = c.get(path)
        assert r.status_code == 422 and "NUL" in r.text, (path, r.status_code)
    r = c.post("/holds/x/disposition", data={"csrf": csrf, "action": "release",
                                             "note": "ok\x00"})
    assert r.status_code == 422 and "NUL" in r.text
    api = client(db)
    for path in ("/api/v1/holds?lot=a%00", "/api/v1/holds.csv?rule=a%00"):
        r = api.get(path, headers=k.headers("engineer"))
        assert r.status_code == 422, (path, r.text)
        assert r.json()["errors"][0]["pointer"].startswith("query:/")


def test_a_panel_with_no_measurement_has_a_page(db):
    make_product(db)
    make_panel(db)
    k = make_keys(db)
    c = page_client(db)
    sign_in(c, k["engineer"])
    page = c.get("/panels/P0001")
    assert page.status_code == 200
    assert "No measurement yet." in page.text
    assert page.text.count('class="ftb-point"') == 0
    assert page.text.count('class="limit-line"') == 1
