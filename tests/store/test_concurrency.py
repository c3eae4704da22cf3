"""Concurrent writers wait for each other instead of failing (SQLite: BEGIN IMMEDIATE and a
busy timeout; PostgreSQL: row locks)."""

from __future__ import annotations

import threading
from concurrent.futures import ThreadPoolExecutor

from sqlalchemy import func, select

from app.errors import Conflict, DomainError, InvalidInput
from app.schemas.measurements import MeasurementCreate
from app.schemas.panels import PanelCreate
from app.schemas.products import ProductCreate
from app.services import keys, measurements, panel_estimate, panels, products
from app.services.history import product_history
from app.services.keys import Principal
from app.store.tables import Measurement, Panel, PanelEstimate, Product
from tests.factories import make_panel, make_product, measurement, product_data


def test_parallel_posts_all_land(db):
    make_product(db)
    serials = [make_panel(db, f"P{i}") for i in range(4)]
    key, _ = keys.create(db=db, role="uploader", label="t")
    who = keys.authenticate(db=db, authorization=f"Bearer {key}")
    assert isinstance(who, Principal)
    jobs = [MeasurementCreate(**measurement(s, layer, side, (1.0,)))
            for s in serials for layer in (1, 2, 3) for side in "AB"]

    def post(data: MeasurementCreate) -> bool:
        replayed, _ = measurements.accept(db=db, data=data, principal=who,
                                          body=data.model_dump_json().encode())
        return replayed

    # The product's first write sets its history cut-off (a new history revision); made before
    # the race, so that every write in it forecasts with the same history, as a recompute does.
    warm_up = MeasurementCreate(**measurement(make_panel(db, "WARM"), 1, "A", (1.0,)))
    post(warm_up)
    with ThreadPoolExecutor(max_workers=4) as pool:
        replays = list(pool.map(post, jobs))
    assert replays == [False] * len(jobs)
    with db.transaction() as s:
        assert s.scalar(select(func.count()).select_from(Measurement)) == len(jobs) + 1
        # Writes prepared outside the lock, racing on the same panels: every stored estimate
        # must still be the one its fits in force give (stale ones are recomputed under the
        # lock when the panel's revision moved).
        for serial in serials:
            panel = s.get(Panel, serial)
            assert panel.revision == 6
            product = s.get(Product, panel.product_id)
            fresh = panel_estimate.compute(serial=serial, product=product,
                                  layers=panel_estimate.current_layers(s, serial),
                                  histories=product_history(db, s, product=product))
            stored = s.get(PanelEstimate, serial)
            assert stored.layers_a == [1, 2, 3] and stored.layers_b == [1, 2, 3]
            assert stored.ftb_worst_um == fresh.values["ftb_worst_um"]
            assert stored.p_exceed == fresh.values["p_exceed"]


def _race(n: int, job) -> list:
    """Run ``job(i)`` for i in 0..n-1 on n threads released together; results or exceptions."""
    barrier = threading.Barrier(n)

    def run(i: int):
        barrier.wait()
        try:
            return job(i)
        except DomainError as exc:
            return exc

    with ThreadPoolExecutor(max_workers=n) as pool:
        return list(pool.map(run, range(n)))


def test_identical_registrations_in_a_new_lot_race_to_one_201(db):
    make_product(db)
    data = PanelCreate(serial="RACE-1", product="TESTPROD", lot="NEWLOT")
    results = _race(8, lambda i: panels.create(db=db, data=data, actor="t"))
    created = [r[0] for r in results if isinstance(r, tuple)]
    assert len(created) == 8, results  # nobody fails: one creates, the others read it
    assert created.count(True) == 1


def test_a_conflicting_registration_is_409_under_a_race(db):
    make_product(db)
    results = _race(8, lambda i: panels.create(
        db=db, data=PanelCreate(serial="RACE-2", product="TESTPROD", lot=f"LOT{i % 2}"),
        actor="t"))
    conflicts = [r for r in results if isinstance(r, Conflict)]
    created = [r for r in results if isinstance(r, tuple) and r[0]]
    assert len(created) == 1 and len(conflicts) + len(created) + sum(
        isinstance(r, tuple) and not r[0] for r in results) == 8
    assert all(isinstance(r, tuple | Conflict) for r in results), results


def test_identical_products_race_to_one_201(db):
    data = ProductCreate(**product_data(code="RACEPROD"))
    results = _race(8, lambda i: products.create(db=db, data=data, actor="t"))
    assert all(isinstance(r, tuple) for r in results), results
    assert [r[0] for r in results].count(True) == 1


def test_one_idempotency_key_with_different_bodies_on_different_panels(db):
    make_product(db)
    serials = [make_panel(db, f"IK{i}") for i in range(6)]
    key, _ = keys.create(db=db, role="uploader", label="t")
    who = keys.authenticate(db=db, authorization=f"Bearer {key}")

    def post(i: int):
        data = MeasurementCreate(**measurement(serials[i], 1, "A", (float(i),)))
        return measurements.accept(db=db, data=data, principal=who,
                                   body=data.model_dump_json().encode(),
                                   idempotency_key="same-key")

    results = _race(6, post)
    won = [r for r in results if isinstance(r, tuple)]
    refused = [r for r in results if isinstance(r, InvalidInput)]
    assert len(won) == 1 and len(refused) == 5, results
    assert all("different body" in r.detail for r in refused)
    with db.reading() as s:
        assert s.scalar(select(func.count()).select_from(Measurement)) == 1
