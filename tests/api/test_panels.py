"""Panel registration and the panel list: filters, sorting, cursor pagination."""

from __future__ import annotations

import base64
import json

import pytest

from tests.factories import client, make_keys, make_product, measurement


@pytest.fixture
def setup(db):
    make_product(db)
    make_product(db, code="OTHER", flip_axis="x")
    return db, client(db), make_keys(db)


def test_register_repeat_and_conflict(setup):
    _db, c, k = setup
    body = {"serial": "P1", "product": "TESTPROD", "lot": "LOT1"}
    first = c.post("/api/v1/panels", json=body, headers=k.headers("uploader"))
    assert first.status_code == 201
    assert first.json()["status"] == "in_process" and first.json()["forecast"] is None
    assert c.post("/api/v1/panels", json=body, headers=k.headers("uploader")).status_code == 200
    r = c.post("/api/v1/panels", json={**body, "lot": "LOT2"}, headers=k.headers("uploader"))
    assert r.status_code == 409 and "P1" in r.json()["detail"]
    r = c.post("/api/v1/panels", json={"serial": "P2", "product": "OTHER", "lot": "LOT1"},
               headers=k.headers("uploader"))
    assert r.status_code == 409 and "another product" in r.json()["detail"]
    assert c.get("/api/v1/panels/NOPE", headers=k.headers("engineer")).status_code == 404


def test_list_filters_sorting_and_pagination(setup):
    _db, c, k = setup
    for i in range(7):
        c.post(
            "/api/v1/panels",
            json={"serial": f"P{i}", "product": "TESTPROD", "lot": "LA" if i < 4 else "LB"},
            headers=k.headers("uploader"),
        )
        c.post("/api/v1/measurements", json=measurement(f"P{i}", 1, "A", (float(i % 4),)),
               headers=k.headers("uploader"))
    c.post("/api/v1/panels", json={"serial": "Q0", "product": "OTHER", "lot": "LC"},
           headers=k.headers("uploader"))
    h = k.headers("engineer")
    all_ = c.get("/api/v1/panels?limit=3", headers=h).json()
    serials = [p["serial"] for p in all_["items"]]
    cursor = all_["next_cursor"]
    while cursor:
        page = c.get(f"/api/v1/panels?limit=3&cursor={cursor}", headers=h).json()
        serials += [p["serial"] for p in page["items"]]
        cursor = page["next_cursor"]
    assert serials == ["P0", "P1", "P2", "P3", "P4", "P5", "P6", "Q0"]
    lot_b = c.get("/api/v1/panels?lot=LB", headers=h).json()["items"]
    assert [p["serial"] for p in lot_b] == ["P4", "P5", "P6"]
    other = c.get("/api/v1/panels?product=OTHER", headers=h).json()["items"]
    assert [p["serial"] for p in other] == ["Q0"]
    # Sorted by FTB, worst first, paged two at a time; ties by serial, same direction.
    got = []
    url = "/api/v1/panels?sort=ftb_current&order=desc&limit=2"
    while url:
        page = c.get(url, headers=h).json()
        got += [(p["ftb_current_um"], p["serial"]) for p in page["items"]]
        url = f"/api/v1/panels?sort=ftb_current&order=desc&limit=2&cursor={page['next_cursor']}" \
            if page["next_cursor"] else None
    # Q0 has no measurement yet: FTB 0, listed with the other zeros.
    assert [s for _, s in got] == ["P3", "P6", "P2", "P5", "P1", "Q0", "P4", "P0"]
    bad = c.get("/api/v1/panels?status=lost", headers=h)
    assert bad.status_code == 422 and bad.json()["errors"][0]["pointer"].startswith("query:")
    assert c.get("/api/v1/panels?cursor=garbage", headers=h).status_code == 422
    odd = base64.urlsafe_b64encode(json.dumps([1, "x"]).encode()).decode()
    assert c.get(f"/api/v1/panels?sort=updated&cursor={odd}", headers=h).status_code == 422


def test_product_defaults_and_repeat(setup):
    _db, c, k = setup
    p = c.get("/api/v1/products/TESTPROD", headers=k.headers("uploader")).json()
    assert len(p["check_points_mm"]) == 25
    xs = sorted({x for x, _ in p["check_points_mm"]})
    assert xs[0] == pytest.approx(-0.45 * 510) and xs[-1] == pytest.approx(0.45 * 510)
    # Held from "more likely than not" (app.overlay.risk.RiskThresholds says why).
    assert (p["p_watch"], p["p_watch_leave"]) == (0.05, 0.02)
    assert (p["p_at_risk"], p["p_at_risk_leave"]) == (0.50, 0.25)
    body = {"code": "TESTPROD", "layers_per_side": 10, "flip_axis": "y", "panel_width_mm": 510,
            "panel_height_mm": 515, "ftb_limit_um": 60, "l2l_limit_um": 12}
    assert c.post("/api/v1/products", json=body, headers=k.headers("admin")).status_code == 409
    same = {**body, "layers_per_side": 12}
    assert c.post("/api/v1/products", json=same, headers=k.headers("admin")).status_code == 200
    bad = {**body, "code": "NEW", "check_points_mm": [[300, 0]]}
    r = c.post("/api/v1/products", json=bad, headers=k.headers("admin"))
    assert r.status_code == 422 and "outside the panel" in r.text


def test_risk_filter_finds_each_level(setup):
    db, c, k = setup
    make_product(db, code="LEVELS", p_at_risk=0.5)  # watch from 0.05 up to 0.5
    for serial in ("NONE", "WATCH", "RISK", "OVER"):
        c.post("/api/v1/panels", json={"serial": serial, "product": "LEVELS", "lot": "LV"},
               headers=k.headers("uploader"))

    def post(serial: str, layer: int, side: str, tx: float) -> None:
        r = c.post(
            "/api/v1/measurements",
            json=measurement(serial, layer, side, (tx,), frame="panel"),
            headers=k.headers("uploader"),
        )
        assert r.status_code == 201, r.text

    post("WATCH", 1, "A", 1.0)  # nothing known yet: the prior alone gives P ~ 0.1-0.2
    for layer in range(1, 6):  # 4 um a layer each way: FTB 40 um after 5 pairs
        post("RISK", layer, "A", 4.0)
        post("RISK", layer, "B", -4.0)
    post("OVER", 1, "A", 15.0)  # beyond the 12 um L2L limit
    h = k.headers("engineer")
    found = {level: [p["serial"] for p in c.get(
        f"/api/v1/panels?product=LEVELS&risk={level}", headers=h).json()["items"]]
        for level in ("clear", "watch", "at_risk", "over_limit")}
    assert found == {"clear": ["NONE"], "watch": ["WATCH"], "at_risk": ["RISK"],
                     "over_limit": ["OVER"]}


def test_product_list_by_code(setup):
    db, c, k = setup
    make_product(db, code="ALPHA", layers_per_side=4)
    r = c.get("/api/v1/products", headers=k.headers("uploader"))
    assert r.status_code == 200
    items = r.json()["items"]
    assert [p["code"] for p in items] == ["ALPHA", "OTHER", "TESTPROD"]
    assert items[0]["layers_per_side"] == 4 and len(items[2]["check_points_mm"]) == 25
