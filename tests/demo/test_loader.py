"""The demo scenario, loaded through the services, tells the story it was written to tell."""

from __future__ import annotations

from collections import Counter

from app.demo.loader import closest_to_limit, load_into
from app.demo.simulator import generate
from app.services import holds, panels


def test_demo_shows_every_risk_level_and_holds_the_panels_made_risky(db, tmp_path):
    summary = generate(tmp_path)  # the committed sample_data equals this (test_simulator)
    demo_keys = load_into(db)
    assert set(demo_keys) == {"tool", "engineer", "supervisor", "admin"}
    page = panels.list_panels(db=db, limit=500)
    assert len(page.items) == summary.panels
    levels = Counter(p.risk for p in page.items)
    assert set(levels) == {"clear", "watch", "at_risk", "over_limit"}
    assert levels["clear"] > levels["watch"] > 0 and levels["clear"] > summary.panels / 2
    held = {h.panel: h for h in holds.list_all_holds(db=db, state="open").holds}
    for serial in (*summary.over_limit, *summary.growing_core):
        assert serial in held, serial
    # Drifting panels: held, or watched when they are caught very early (a new product's prior
    # keeps less of a drift seen on two or three layers than history would).
    by_serial = {p.serial: p for p in page.items}
    assert sum(s in held for s in summary.drifting) >= len(summary.drifting) - 2
    for serial in summary.drifting:
        assert serial in held or by_serial[serial].risk == "watch", serial
    for serial in summary.over_limit:
        assert held[serial].risk == "over_limit"
        assert held[serial].rule in ("ftb_over_limit", "l2l_over_limit")
    top = [p.serial for p, _ in closest_to_limit(db, n=10)]
    assert set(summary.over_limit) & set(top)
