"""Concurrent writers wait for each other instead of failing (SQLite: BEGIN IMMEDIATE and a
busy timeout; PostgreSQL: row locks)."""

from __future__ import annotations

from concurrent.futures import ThreadPoolExecutor

from sqlalchemy import func, select

from app.schemas.measurements import MeasurementCreate
from app.services import keys, measurements
from app.services.keys import Principal
from app.store.tables import Measurement
from tests.factories import make_panel, make_product, measurement


def test_parallel_posts_all_land(db):
    make_product(db)
    serials = [make_panel(db, f"P{i}") for i in range(4)]
    key, _ = keys.create(db=db, role="tool", label="t")
    who = keys.authenticate(db=db, authorization=f"Bearer {key}")
    assert isinstance(who, Principal)
    jobs = [MeasurementCreate(**measurement(s, layer, side, (1.0,)))
            for s in serials for layer in (1, 2, 3) for side in "AB"]

    def post(data: MeasurementCreate) -> bool:
        replayed, _ = measurements.accept(db=db, data=data, principal=who,
                                          body=data.model_dump_json().encode())
        return replayed

    with ThreadPoolExecutor(max_workers=4) as pool:
        replays = list(pool.map(post, jobs))
    assert replays == [False] * len(jobs)
    with db.transaction() as s:
        assert s.scalar(select(func.count()).select_from(Measurement)) == len(jobs)
