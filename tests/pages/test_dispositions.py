"""The panel page and the disposition form through httpx, on both databases: review, confirm,
the audit trail, and what an engineer or a forged form may not do."""

from __future__ import annotations

import re

from app.services import audit_trail, holds
from tests.factories import client, make_keys, make_panel, make_product, measurement
from tests.pages.helpers import csrf_of, page_client, sign_in


def _held_panel(db, k, serial="P0001", terms=(30.0,)):
    """A panel whose side A drifts 30 um in x at layer 1: over the 12 um L2L limit, held."""
    make_panel(db, serial)
    r = client(db).post("/api/v1/measurements", json=measurement(serial, 1, "A", terms),
                        headers=k.headers("uploader"))
    assert r.status_code == 201, r.text
    (hold,) = holds.for_panel(db=db, serial=serial)
    assert hold.state == "open"
    return hold


def _review(c, hold, csrf, **form):
    return c.post(f"/holds/{hold.id}/disposition", data={"csrf": csrf, "step": "review",
                                                        **form})


def test_supervisor_reviews_then_confirms_each_disposition(db):
    make_product(db)
    k = make_keys(db)
    cases = {"P0001": {"action": "release", "note": "QA ok, build on"},
             "P0002": {"action": "scrap", "note": "drift too large, per QP-7"},
             "P0003": {"action": "rework", "note": "redo the layer", "rework_side": "A",
                       "rework_layer": "1"}}
    held = {serial: _held_panel(db, k, serial) for serial in cases}
    c = page_client(db)
    sign_in(c, k["supervisor"])
    for serial, form in cases.items():
        page = c.get(f"/panels/{serial}")
        assert page.status_code == 200 and 'id="disposition"' in page.text
        review = _review(c, held[serial], csrf_of(page.text), **form)
        assert review.status_code == 200, review.text
        assert f"Confirm {form['action']}" in review.text
        assert holds.get(db=db, hold_id=held[serial].id).state == "open"  # nothing written yet
        fields = dict(re.findall(r'<input type="hidden" name="(\w+)" value="([^"]*)"',
                                 review.text))
        assert fields["step"] == "confirm"
        done = c.post(f"/holds/{held[serial].id}/disposition", data=fields)
        assert done.status_code == 303 and done.headers["location"].startswith(
            f"/panels/{serial}")
        closed = holds.get(db=db, hold_id=held[serial].id)
        assert (closed.state, closed.disposition, closed.disposition_by) == (
            "closed", form["action"], "test supervisor")
        assert closed.disposition_note == form["note"]
    trail = audit_trail.list_audit(db=db, actor="test supervisor").items
    assert sorted(e.action for e in trail) == [
        "disposition_release", "disposition_rework", "disposition_scrap"]
    rework = next(e for e in trail if e.action == "disposition_rework")
    assert {k: rework.details["rework"][k] for k in ("side", "layer")} == {"side": "A", "layer": 1}
    assert rework.details["rework"]["set_aside_measurement"]  # the measurement set aside
    audit_page = c.get("/audit?actor=test+supervisor")
    assert audit_page.status_code == 200
    for serial in cases:
        assert serial in audit_page.text


def test_engineer_sees_no_form_and_a_forged_post_is_refused(db):
    make_product(db)
    k = make_keys(db)
    hold = _held_panel(db, k)
    c = page_client(db)
    sign_in(c, k["engineer"])
    page = c.get("/panels/P0001")
    assert page.status_code == 200
    assert 'id="disposition"' not in page.text and "read-only" in page.text
    forged = c.post(f"/holds/{hold.id}/disposition", data={
        "csrf": csrf_of(page.text), "step": "confirm", "action": "release", "note": "forged"})
    assert forged.status_code == 403 and "engineer" in forged.text
    assert holds.get(db=db, hold_id=hold.id).state == "open"


def test_post_without_csrf_is_refused_and_bad_forms_say_why(db):
    make_product(db)
    k = make_keys(db)
    hold = _held_panel(db, k)
    c = page_client(db)
    sign_in(c, k["supervisor"])
    r = c.post(f"/holds/{hold.id}/disposition", data={"step": "confirm", "action": "scrap",
                                                      "note": "no token"})
    assert r.status_code == 403 and "CSRF" in r.text
    csrf = csrf_of(c.get("/panels/P0001").text)
    r = _review(c, hold, csrf, action="release", note="")
    assert r.status_code == 422 and "note" in r.text
    r = _review(c, hold, csrf, action="rework", note="redo it", rework_side="A",
                rework_layer="40")
    assert r.status_code == 422
    r = c.post(f"/holds/{hold.id}/disposition", data={"csrf": csrf, "step": "confirm",
               "action": "rework", "note": "redo it", "rework_side": "B", "rework_layer": "13"})
    assert r.status_code == 422 and "no measurement in force of layer 13 side B" in r.text
    assert holds.get(db=db, hold_id=hold.id).state == "open"
    r = _review(c, hold, csrf, action="release", note="fine")
    assert r.status_code == 200
    r = c.post("/holds/not-a-hold/disposition", data={"csrf": csrf, "step": "confirm",
               "action": "release", "note": "fine"})
    assert r.status_code == 422


def test_panel_page_shows_charts_layers_and_trail(db):
    make_product(db)
    k = make_keys(db)
    _held_panel(db, k)
    c = page_client(db)
    sign_in(c, k["engineer"])
    page = c.get("/panels/P0001").text
    assert page.count('class="ftb-point"') == 1
    assert page.count('class="limit-line"') == 1
    ftb_map = page[page.index('id="ftb-map"'):]
    arrows = ftb_map[ftb_map.index('<g class="arrows"'):]
    assert arrows[:arrows.index("</g>")].count("<line x1") == 25  # the default 5 x 5 points
    assert 'id="map-measured"' in page and 'id="map-residual"' in page
    assert "panel = facing side" in page
    assert "panel register" in page and "hold" in page
    assert c.get("/panels/NOPE").status_code == 404
    assert c.get("/panels/P0001?map=C9").status_code == 422


def test_board_lists_open_holds_worst_first_and_filters(db):
    make_product(db)
    make_product(db, code="OTHER")
    k = make_keys(db)
    _held_panel(db, k, "P0001", terms=(20.0,))
    make_panel(db, "P0009", product="OTHER", lot="LOT9")
    client(db).post("/api/v1/measurements", json=measurement("P0009", 1, "A", (25.0,)),
                    headers=k.headers("uploader"))
    c = page_client(db)
    sign_in(c, k["supervisor"])
    board = c.get("/board").text
    order = re.findall(r'<tr data-panel="([^"]+)"', board)
    expected = [h.panel for h in holds.list_holds(db=db).holds]
    assert order == expected and set(order) == {"P0001", "P0009"}
    only = re.findall(r'<tr data-panel="([^"]+)"', c.get("/board?product=OTHER").text)
    assert only == ["P0009"]
    assert re.findall(r'<tr data-panel="([^"]+)"', c.get("/board?lot=LOT1").text) == ["P0001"]
    assert "No open hold matches" in c.get("/board?rule=manual").text
    csv_text = c.get("/api/v1/holds.csv?product=OTHER").text
    assert "P0009" in csv_text and "P0001" not in csv_text
