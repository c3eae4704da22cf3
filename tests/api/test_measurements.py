"""Posting measurements: the fit, the panel state, idempotency, supersede, out-of-order layers."""

from __future__ import annotations

import numpy as np
import pytest
from sqlalchemy import func, select

from app.overlay.fit import fit_measurement
from app.overlay.frames import mirror_sites
from app.overlay.stack import accumulate, default_check_points
from app.store import sitepack
from app.store.tables import Measurement, SiteSet
from tests.factories import client, make_keys, make_panel, make_product, measurement


@pytest.fixture
def setup(db):
    make_product(db)
    make_panel(db)
    return db, client(db), make_keys(db)


def _count(db, table) -> int:
    with db.transaction() as s:
        return int(s.scalar(select(func.count()).select_from(table)))


def test_post_returns_fit_and_state(setup):
    db, c, k = setup
    r = c.post("/api/v1/measurements", json=measurement("P0001", 1, "A", (2.0, -1.0)),
               headers=k.headers("uploader"))
    assert r.status_code == 201, r.text
    body = r.json()
    # The API gives um to 3 decimals (app.schemas.figures): equal to within half of the last.
    assert body["fit"]["tx_um"] == pytest.approx(2.0, abs=5e-4)
    assert body["fit"]["ty_um"] == pytest.approx(-1.0, abs=5e-4)
    assert body["panel_after"]["layers_reached"] == {"A": 1, "B": 0}
    assert body["panel_after"]["ftb_current_um"] == pytest.approx(np.hypot(2.0, 1.0), abs=5e-4)
    assert body["superseded"] is None
    with db.reading() as s:
        pack = s.scalars(select(SiteSet)).one()
    assert pack.n_sites == 25
    posted = sitepack.unpack(pack.posted)
    sent = measurement("P0001", 1, "A", (2.0, -1.0))["sites"]
    np.testing.assert_array_equal(posted, [[p["x_mm"], p["y_mm"], p["dx_um"], p["dy_um"]]
                                           for p in sent])


def test_ftb_in_api_equals_core_computation(setup):
    """Side B posted in its tool frame; the API's FTB must equal the core's own accumulation of
    the mirrored fits at the product's default check points."""
    _db, c, k = setup
    rng = np.random.default_rng(7)
    core_a, core_b = [], []
    for layer in (1, 2, 3):
        for side, store in (("A", core_a), ("B", core_b)):
            terms = rng.normal(0, [3, 3, 0.003, 0.003, 0.002, 0.002, 0, 0])
            body = measurement("P0001", layer, side, terms, noise=0.5, seed=layer)
            r = c.post("/api/v1/measurements", json=body, headers=k.headers("uploader"))
            assert r.status_code == 201, r.text
            arr = np.array([[s["x_mm"], s["y_mm"], s["dx_um"], s["dy_um"]] for s in body["sites"]])
            x, y, dx, dy = mirror_sites(*arr.T, side=side, flip_axis="y")
            store.append(fit_measurement(x, y, dx, dy).terms)
    points = default_check_points(510.0, 515.0)
    expected = accumulate(np.array(core_a), np.array(core_b), points)
    state = c.get("/api/v1/panels/P0001", headers=k.headers("engineer")).json()
    got = np.array([[p["dx_um"], p["dy_um"]] for p in state["ftb_current_points"]])
    # um to 3 decimals at the edge (app.schemas.figures): within half of the last decimal.
    np.testing.assert_allclose(got, expected.ftb_um, atol=5e-4)
    assert state["ftb_current_um"] == pytest.approx(expected.worst_um, abs=5e-4)


def test_idempotent_replay_and_key_reuse(setup):
    db, c, k = setup
    body = measurement("P0001", 1, "A", (1.0,))
    h = {**k.headers("uploader"), "Idempotency-Key": "m-0001"}
    first = c.post("/api/v1/measurements", json=body, headers=h)
    assert first.status_code == 201
    again = c.post("/api/v1/measurements", json=body, headers=h)
    assert again.status_code == 200
    assert again.json() == first.json()
    assert _count(db, Measurement) == 1
    other = measurement("P0001", 1, "A", (2.0,))
    reuse = c.post("/api/v1/measurements", json=other, headers=h)
    assert reuse.status_code == 422
    assert "Idempotency-Key" in reuse.json()["detail"]
    assert reuse.headers["content-type"].startswith("application/problem+json")
    assert _count(db, Measurement) == 1


def test_second_measurement_supersedes_and_both_are_kept(setup):
    db, c, k = setup
    first = c.post("/api/v1/measurements", json=measurement("P0001", 1, "A", (4.0,)),
                   headers=k.headers("uploader")).json()
    second = c.post("/api/v1/measurements", json=measurement("P0001", 1, "A", (1.0,)),
                    headers=k.headers("uploader"))
    assert second.status_code == 201
    assert second.json()["superseded"] == first["id"]
    assert second.json()["panel_after"]["ftb_current_um"] == pytest.approx(1.0, abs=1e-9)
    assert _count(db, Measurement) == 2
    stack = c.get("/api/v1/panels/P0001/stack", headers=k.headers("engineer")).json()
    assert [layer["measurement_id"] for layer in stack["layers"]] == [second.json()["id"]]


def test_layers_out_of_order_report_missing(setup):
    _db, c, k = setup
    for layer in (3, 1):
        r = c.post("/api/v1/measurements", json=measurement("P0001", layer, "A", (1.0,)),
                   headers=k.headers("uploader"))
        assert r.status_code == 201
    state = r.json()["panel_after"]
    assert state["layers_reached"]["A"] == 3
    assert state["missing_layers"] == {"A": [2], "B": []}
    assert 2 in state["forecast"]["layers_to_come"]["A"]


def test_side_b_frame_panel_is_not_mirrored(setup):
    _db, c, k = setup
    tool = c.post("/api/v1/measurements", json=measurement("P0001", 1, "B", (3.0,)),
                  headers=k.headers("uploader")).json()
    assert tool["fit"]["tx_um"] == pytest.approx(-3.0, abs=1e-9)  # flip about y: Tx changes sign
    panel = c.post("/api/v1/measurements",
                   json=measurement("P0001", 2, "B", (3.0,), frame="panel"),
                   headers=k.headers("uploader")).json()
    assert panel["fit"]["tx_um"] == pytest.approx(3.0, abs=1e-9)


def test_stack_endpoint_lists_layers_with_cumulative_ftb(setup):
    _db, c, k = setup
    for layer in (1, 2):
        c.post("/api/v1/measurements", json=measurement("P0001", layer, "A", (5.0,)),
               headers=k.headers("uploader"))
        c.post("/api/v1/measurements", json=measurement("P0001", layer, "B", (5.0,)),
               headers=k.headers("uploader"))
    stack = c.get("/api/v1/panels/P0001/stack", headers=k.headers("engineer")).json()
    a = [layer for layer in stack["layers"] if layer["side"] == "A"]
    # +5 um in both tools' own frames adds up front to back through the mirror: 10, then 20.
    assert [layer["ftb_through_layer_um"] for layer in a] == pytest.approx([10.0, 20.0])
    assert stack["linear_worst_case_um"] == pytest.approx(20.0)
