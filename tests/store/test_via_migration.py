"""Migration 0004v: a product's routed connection gives its copper to the via settings."""

from __future__ import annotations

import json

from sqlalchemy import create_engine, text

from app.store.migrate import upgrade


def test_connection_copper_carries_over(tmp_path):
    engine = create_engine(f"sqlite:///{tmp_path / 'old.db'}")
    upgrade(engine, "0003")
    connection = {"width_um": 12.0, "thickness_um": 10.0, "length_um": 2000.0,
                  "resistivity_ohm_m": 1.7e-8, "resistance_limit_ohm": 0.29}
    with engine.begin() as conn:
        for code, conn_json in (("OLD", json.dumps(connection)), ("BARE", None)):
            conn.execute(text(
                "INSERT INTO products (code, name, layers_per_side, flip_axis, panel_width_mm, "
                "panel_height_mm, ftb_limit_um, l2l_limit_um, model_terms, check_points_mm, "
                "p_watch, p_at_risk, connection, created_at) VALUES (:code, '', 12, 'y', 510, "
                "515, 60, 12, 6, '[[0, 0]]', 0.05, 0.2, :c, '2026-12-01 00:00:00')"),
                {"code": code, "c": conn_json})
    upgrade(engine)
    with engine.connect() as conn:
        rows = {r.code: r for r in conn.execute(text(
            "SELECT code, copper_thickness_um, resistivity_ohm_m, via_diameter_um "
            "FROM products"))}
        columns = {r[1] for r in conn.execute(text("PRAGMA table_info(products)"))}
    assert (rows["OLD"].copper_thickness_um, rows["OLD"].resistivity_ohm_m) == (10.0, 1.7e-8)
    assert rows["OLD"].via_diameter_um is None  # no diameters to infer: L2L limit alone
    assert rows["BARE"].copper_thickness_um is None
    assert "connection" not in columns
    engine.dispose()
