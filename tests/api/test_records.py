"""GET /api/v1/audit and GET /api/v1/rejected-uploads: filters, pages, who sees what."""

from __future__ import annotations

import base64
import json

from tests.factories import client, make_keys, make_panel, make_product


def _hold(c, k, serial, reason="checking the trail"):
    r = c.post(f"/api/v1/panels/{serial}/holds", json={"reason": reason},
               headers=k.headers("engineer"))
    assert r.status_code == 201, r.text
    return r.json()["id"]


def test_audit_filters_by_panel_hold_actor_and_since(db):
    make_product(db)
    make_panel(db, "P0001")
    make_panel(db, "P0002")
    k = make_keys(db)
    c = client(db)
    first = _hold(c, k, "P0001")
    c.post(f"/api/v1/holds/{first}/disposition", json={"action": "release", "note": "ok by QA"},
           headers=k.headers("supervisor"))
    _hold(c, k, "P0002")
    h = k.headers("engineer")

    everything = c.get("/api/v1/audit", headers=h).json()["items"]
    # Newest first: the last thing done was the hold on P0002.
    assert [(e["action"], e["subject"]) for e in everything[:3]] == [
        ("hold", "P0002"), ("disposition_release", "P0001"), ("hold", "P0001")]
    by_panel = c.get("/api/v1/audit", params={"panel": "P0001"}, headers=h).json()["items"]
    assert [e["action"] for e in by_panel] == ["disposition_release", "hold", "panel_register"]
    by_hold = c.get("/api/v1/audit", params={"hold": first}, headers=h).json()["items"]
    assert [e["action"] for e in by_hold] == ["disposition_release", "hold"]
    by_actor = c.get("/api/v1/audit", params={"actor": "test supervisor"}, headers=h).json()
    assert [e["action"] for e in by_actor["items"]] == ["disposition_release"]
    since = everything[1]["at"]
    recent = c.get("/api/v1/audit", params={"since": since}, headers=h).json()["items"]
    assert {e["id"] for e in recent} == {e["id"] for e in everything if e["at"] >= since}
    assert everything[-1]["id"] not in {e["id"] for e in recent}


def test_audit_pages_cover_every_entry_once(db):
    make_product(db)
    for i in range(7):
        make_panel(db, f"P{i:04d}")
    k = make_keys(db)
    c = client(db)
    seen, cursor = [], None
    while True:
        params = {"limit": 3, **({"cursor": cursor} if cursor else {})}
        page = c.get("/api/v1/audit", params=params, headers=k.headers("admin")).json()
        seen += [e["id"] for e in page["items"]]
        cursor = page["next_cursor"]
        if not cursor:
            break
    assert len(seen) == len(set(seen)) == 8  # 1 product + 7 panels
    assert seen == sorted(seen, reverse=True)


def test_audit_refuses_bad_filters(db):
    k = make_keys(db)
    c = client(db)
    h = k.headers("engineer")
    bad_cursor = base64.urlsafe_b64encode(json.dumps(["x"]).encode()).decode()
    for params in ({"cursor": bad_cursor}, {"since": "2026-11-02T06:00:00"},
                   {"since": "yesterday"}, {"panel": "A-1\x00"}, {"limit": 0}):
        r = c.get("/api/v1/audit", params=params, headers=h)
        assert r.status_code == 422, (params, r.text)
        assert r.headers["content-type"].startswith("application/problem+json")


def test_rejected_uploads_own_key_and_all_for_admin(db):
    make_product(db)
    k = make_keys(db)
    c = client(db)
    bad = {"serial": "P/1", "product": "TESTPROD", "lot": "L"}
    assert c.post("/api/v1/panels", json=bad, headers=k.headers("uploader")).status_code == 422
    assert c.post("/api/v1/panels", json=bad, headers=k.headers("engineer")).status_code == 422
    assert c.post("/api/v1/panels", json=bad).status_code == 401

    own = c.get("/api/v1/rejected-uploads", headers=k.headers("uploader")).json()["items"]
    assert [r["key_label"] for r in own] == ["test uploader"]
    assert own[0]["endpoint"] == "/api/v1/panels" and own[0]["status"] == 422
    assert json.loads(own[0]["body_start"]) == bad
    assert own[0]["body_bytes"] == len(own[0]["body_start"].encode())
    everyone = c.get("/api/v1/rejected-uploads", headers=k.headers("admin")).json()["items"]
    # an anonymous refusal is counted, never stored
    assert sorted(r["key_label"] for r in everyone) == sorted(["test uploader", "test engineer"])
    assert c.get("/api/v1/rejected-uploads", headers=k.headers("supervisor")).json()[
        "items"] == []
