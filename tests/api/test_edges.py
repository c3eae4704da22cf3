"""Edges found in review: hand-worked FTB through the flip-x mirror, cumulative FTB with layer
gaps, 500s as problem documents, anonymous uploads, imports onto scrapped panels."""

from __future__ import annotations

import io

import pytest
from fastapi.testclient import TestClient

from app.main import create_app
from app.services import measurements, rejections
from tests.factories import client, make_keys, make_panel, make_product, measurement


@pytest.fixture
def setup(db):
    make_product(db)
    make_product(db, code="FLIPX", flip_axis="x")
    make_panel(db, "P1")
    make_panel(db, "X1", product="FLIPX", lot="LX")
    return db, client(db), make_keys(db)


def _post(c, k, body):
    r = c.post("/api/v1/measurements", json=body, headers=k.headers("uploader"))
    assert r.status_code == 201, r.text
    return r.json()["panel_after"]


def test_flip_x_ftb_worked_by_hand(setup):
    _db, c, k = setup
    # Side A: (+3, +5) um; side B in its own tool frame: (+3, +5) um. Flip about x keeps dx and
    # turns dy: side B is (+3, -5) in the panel frame, so FTB = A - B = (0, +10) everywhere.
    _post(c, k, measurement("X1", 1, "A", (3.0, 5.0)))
    state = _post(c, k, measurement("X1", 1, "B", (3.0, 5.0)))
    for point in state["ftb_current_points"]:
        assert point["dx_um"] == pytest.approx(0.0, abs=1e-9)
        assert point["dy_um"] == pytest.approx(10.0, abs=1e-9)
    assert state["ftb_current_um"] == pytest.approx(10.0, abs=1e-9)


def test_cumulative_ftb_counts_layers_by_number_with_gaps(setup):
    _db, c, k = setup
    for layer in (1, 2, 3):
        _post(c, k, measurement("P1", layer, "A", (5.0,)))
    _post(c, k, measurement("P1", 3, "B", (5.0,)))  # B layers 1 and 2 not measured yet
    stack = c.get("/api/v1/panels/P1/stack", headers=k.headers("engineer")).json()
    cumulative = {(layer["side"], layer["layer"]): layer["ftb_through_layer_um"]
                  for layer in stack["layers"]}
    # Worked by hand: A adds +5 a layer; B's layer 3, +5 in its tool frame, is -5 in the panel
    # frame (flip y), so layers 1..3 give 15 - (-5) = 20.
    assert cumulative == pytest.approx({("A", 1): 5.0, ("A", 2): 10.0, ("A", 3): 20.0,
                                        ("B", 3): 20.0})
    state = c.get("/api/v1/panels/P1", headers=k.headers("engineer")).json()
    assert state["missing_layers"] == {"A": [], "B": [1, 2]}


def test_unexpected_failure_is_a_problem_document_and_the_upload_is_kept(setup, monkeypatch):
    db, _, k = setup

    def broken(**_: object) -> None:
        raise RuntimeError("disk on fire")

    monkeypatch.setattr(measurements, "accept", broken)
    c = TestClient(create_app(db), raise_server_exceptions=False)
    r = c.post(
        "/api/v1/measurements", json=measurement("P1", 1, "A"), headers=k.headers("uploader")
    )
    assert r.status_code == 500
    assert r.headers["content-type"].startswith("application/problem+json")
    assert "disk on fire" not in r.text  # internals stay in the log
    kept = rejections.latest(db=db)
    assert kept.status == 500 and kept.key_label == "test uploader" and kept.body


def _anonymous_refusals(c, k) -> int:
    text = c.get("/metrics", headers=k.headers("admin")).text
    line = next(x for x in text.splitlines()
                if x.startswith("stackledger_anonymous_refusals_total "))
    return int(line.split()[1])


def test_anonymous_writes_are_refused_before_the_body_is_read_and_only_counted(setup):
    db, c, k = setup
    before, kept_before = _anonymous_refusals(c, k), rejections.count(db=db)
    for headers in ({}, {"Authorization": "Bearer sl_nope_nope"}, {"Authorization": "Basic x"}):
        r = c.post("/api/v1/measurements", json=measurement("P1", 1, "A"), headers=headers)
        assert r.status_code == 401, r.text
        assert r.headers["www-authenticate"].startswith("Bearer")
        assert "body was not read" in r.json()["detail"]
    r = c.post("/api/v1/imports", files={"file": ("big.csv", b"x" * 300_000, "text/csv")})
    assert r.status_code == 401
    assert rejections.count(db=db) == kept_before  # nothing stored for anonymous callers
    assert _anonymous_refusals(c, k) == before + 4


def test_import_onto_a_scrapped_panel_is_refused(setup):
    _db, c, k = setup
    _post(c, k, measurement("P1", 1, "A", (20.0,)))  # over the L2L limit: held
    hold = c.get("/api/v1/holds", headers=k.headers("supervisor")).json()["holds"][0]
    c.post(f"/api/v1/holds/{hold['id']}/disposition",
           json={"action": "scrap", "note": "beyond rework"}, headers=k.headers("supervisor"))
    text = ("panel,layer,side,frame,exposure_tool,measured_at,x_mm,y_mm,dx_um,dy_um\n"
            "P1,2,A,facing_side,EXP-T1,2026-11-02T08:00:00Z,0,0,1,1\n")
    r = c.post("/api/v1/imports", files={"file": ("m.csv", io.BytesIO(text.encode()), "text/csv")},
               headers=k.headers("uploader"))
    assert r.status_code == 422
    assert "scrapped" in r.json()["errors"][0]["message"]


def test_a_completed_panel_released_from_hold_is_complete_again(setup):
    db, c, k = setup
    make_product(db, code="TWO", layers_per_side=2)
    make_panel(db, "C1", product="TWO", lot="LC")
    for layer in (1, 2):
        _post(c, k, measurement("C1", layer, "A", (0.5,)))
        state = _post(c, k, measurement("C1", layer, "B", (-0.5,)))
    assert c.get("/api/v1/panels/C1", headers=k.headers("engineer")).json()["status"] \
        == "complete"
    r = c.post("/api/v1/panels/C1/holds", json={"reason": "visual check"},
               headers=k.headers("engineer"))
    assert state["forecast"]["layers_to_come"] == {"A": [], "B": []}
    c.post(f"/api/v1/holds/{r.json()['id']}/disposition",
           json={"action": "release", "note": "visual check passed"},
           headers=k.headers("supervisor"))
    assert c.get("/api/v1/panels/C1", headers=k.headers("engineer")).json()["status"] \
        == "complete"
