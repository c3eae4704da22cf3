"""The pages in Debian's chromium, on the demo scenario, on both databases: sign-in and out,
the shift board's order, dispositions end to end, what an engineer may not do, CSRF, the
charts' elements, keyboard-only reach, an axe-core scan and a screenshot of every page.

Screenshots: see tests/browser/helpers.py.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pytest

from app.services import holds, panels, products
from tests.browser.conftest import DemoServer
from tests.browser.helpers import (
    axe_serious,
    keyboard_missing,
    offline,
    require_axe,
    shots,
    sign_in,
)

pytestmark = pytest.mark.browser

SUPERVISOR, ENGINEER = "supervisor", "engineer"


def _open_holds(server: DemoServer) -> list[Any]:
    return holds.list_holds(db=server.db, limit=50).holds


def test_sign_in_and_sign_out(page: Any, demo_server: DemoServer) -> None:
    errors = offline(page)
    page.goto(f"{demo_server.url}/board")
    page.wait_for_url("**/sign-in?next=/board")
    page.screenshot(path=str(shots(demo_server) / "sign-in.png"))
    page.fill("#key", "sl_00000000_not-a-key")
    page.get_by_role("button", name="Sign in").click()
    assert "unknown or revoked" in page.locator(".alert").inner_text()
    sign_in(page, demo_server, SUPERVISOR)
    cookie = next(c for c in page.context.cookies() if c["name"] == "sl_session")
    assert cookie["httpOnly"] and cookie["sameSite"] == "Strict"
    assert demo_server.keys[SUPERVISOR] not in cookie["value"]
    assert page.locator("header .who").inner_text().startswith("demo supervisor")
    page.get_by_role("button", name="Sign out").click()
    page.wait_for_url("**/sign-in")
    assert not [c for c in page.context.cookies() if c["name"] == "sl_session"]
    page.goto(f"{demo_server.url}/panels")
    page.wait_for_url("**/sign-in?next=/panels")
    assert errors == []


def test_board_lists_the_demo_holds_in_order(page: Any, demo_server: DemoServer) -> None:
    errors = offline(page)
    sign_in(page, demo_server, SUPERVISOR)
    expected = _open_holds(demo_server)
    assert len(expected) >= 10, "the demo scenario should hold panels"
    rows = page.locator("#holds tbody tr")
    assert rows.evaluate_all("rs => rs.map(r => r.dataset.panel)") == [h.panel for h in expected]
    severities = [h.severity for h in expected]
    assert severities == sorted(severities, reverse=True)
    first = rows.first.inner_text()
    assert expected[0].panel in first and expected[0].lot in first
    assert "decisions for the fab's own quality procedures" in page.locator(".caution").inner_text()
    page.screenshot(path=str(shots(demo_server) / "shift-board.png"))
    # A filter by lot keeps that lot's holds only, in the same order.
    lot = expected[0].lot
    page.fill("#f-lot", lot)
    page.get_by_role("button", name="Filter").click()
    page.wait_for_url(f"**/board?*lot={lot}*")
    of_lot = holds.list_holds(db=demo_server.db, limit=50, lot=lot).holds
    assert page.locator("#holds tbody tr").evaluate_all(
        "rs => rs.map(r => r.dataset.panel)") == [h.panel for h in of_lot]
    assert [h.panel for h in expected if h.lot == lot] == [
        h.panel for h in of_lot if h.panel in {e.panel for e in expected}]
    # The CSV link downloads the same list with the session.
    with page.expect_download() as download:
        page.get_by_role("link", name="Download CSV").click()
    text = Path(download.value.path()).read_text(encoding="utf-8")
    assert all(h.panel in text for h in of_lot)
    page.emulate_media(media="print")
    page.screenshot(path=str(shots(demo_server) / "shift-board-print.png"))
    assert page.locator(".filters").is_hidden()
    assert errors == []


def test_charts_carry_their_elements(page: Any, demo_server: DemoServer) -> None:
    offline(page)
    held = _open_holds(demo_server)[0]
    sign_in(page, demo_server, ENGINEER, f"/panels/{held.panel}")
    product = products.get(db=demo_server.db, code=held.product)
    stack = panels.stack(db=demo_server.db, serial=held.panel)
    assert page.locator("#ftb-map g.arrows line").count() == len(product.check_points_mm)
    assert page.locator("#ftb-map .scale-arrow line").count() == 1
    assert page.locator("#stack-walk line.limit-line").count() == 1
    assert page.locator("#stack-walk circle.ftb-point").count() == len(
        {r.layer for r in stack.layers})
    assert page.locator("#stack-walk text", has_text="(µm)").count() == 1
    sites = page.locator("#map-measured g.arrows line").count()
    assert sites > 0 and page.locator("#map-residual g.arrows line").count() == sites
    page.screenshot(path=str(shots(demo_server) / "panel.png"), full_page=True)
    page.locator(".charts").screenshot(path=str(shots(demo_server) / "panel-charts.png"))


def _dispose(page: Any, server: DemoServer, panel: str, action: str, note: str,
             rework: tuple[str, int] | None = None) -> None:
    page.goto(f"{server.url}/panels/{panel}")
    page.check(f"#disposition input[value={action}]")
    if rework:
        page.select_option("#rework-side", rework[0])
        page.fill("#rework-layer", str(rework[1]))
    page.fill("#note", note)
    page.get_by_role("button", name="Review the disposition").click()
    page.wait_for_url("**/disposition")
    assert page.locator("h1").inner_text() == f"Confirm: {action} panel {panel}"
    if action == "rework":
        page.screenshot(path=str(shots(server) / "confirm.png"))
    page.get_by_role("button", name=f"Confirm {action}").click()
    page.wait_for_url(f"**/panels/{panel}?disposed={action}")
    row = page.locator("#holds-of-panel tbody tr").first.inner_text()
    assert "closed" in row and action in row and note in row


def test_supervisor_releases_scraps_and_reworks(page: Any, demo_server: DemoServer) -> None:
    errors = offline(page)
    sign_in(page, demo_server, SUPERVISOR)
    targets = [h.panel for h in _open_holds(demo_server)[-3:]]
    _dispose(page, demo_server, targets[0], "release", "Reviewed with QA, build on")
    _dispose(page, demo_server, targets[1], "scrap", "FTB beyond recovery per QP-7")
    # Rework the last layer measured on side A (a rework names a layer in force).
    top_a = panels.get(db=demo_server.db, serial=targets[2]).layers_reached.A
    _dispose(page, demo_server, targets[2], "rework", f"Strip and redo side A layer {top_a}",
             rework=("A", top_a))
    page.goto(f"{demo_server.url}/audit")
    page.fill("#f-actor", "demo supervisor")
    page.get_by_role("button", name="Filter").click()
    page.wait_for_url("**/audit?*actor=demo*")
    rows = page.locator("#audit tbody tr")
    seen = rows.evaluate_all("rs => rs.map(r => [r.dataset.action, r.cells[3].innerText])")
    assert seen[:3] == [["disposition_rework", targets[2]], ["disposition_scrap", targets[1]],
                        ["disposition_release", targets[0]]]
    assert f"rework side A layer {top_a}" in rows.first.inner_text()
    page.screenshot(path=str(shots(demo_server) / "audit.png"))
    board = page.goto(f"{demo_server.url}/board")
    assert board is not None and board.ok
    listed = page.locator("#holds tbody tr").evaluate_all("rs => rs.map(r => r.dataset.panel)")
    assert not set(targets) & set(listed)
    assert errors == []


def test_engineer_sees_no_form_and_forged_posts_are_refused(page: Any,
                                                           demo_server: DemoServer) -> None:
    offline(page)
    held = _open_holds(demo_server)[0]
    sign_in(page, demo_server, ENGINEER, f"/panels/{held.panel}")
    assert page.locator("#disposition").count() == 0
    assert "read-only" in page.locator("#hold-h + p + p").inner_text()
    csrf = page.locator("header form input[name=csrf]").input_value()
    forged = page.request.post(f"{demo_server.url}/holds/{held.id}/disposition", form={
        "csrf": csrf, "step": "confirm", "action": "release", "note": "not mine to give"})
    assert forged.status == 403 and "engineer" in forged.text()
    assert holds.get(db=demo_server.db, hold_id=held.id).state == "open"
    page.context.clear_cookies()
    sign_in(page, demo_server, SUPERVISOR, f"/panels/{held.panel}")
    no_token = page.request.post(f"{demo_server.url}/holds/{held.id}/disposition", form={
        "step": "confirm", "action": "scrap", "note": "no token"})
    assert no_token.status == 403 and "CSRF" in no_token.text()
    assert holds.get(db=demo_server.db, hold_id=held.id).state == "open"


def _pages(server: DemoServer) -> list[tuple[str, str]]:
    held = _open_holds(server)[0]
    return [("board", "/board"), ("panel-page", f"/panels/{held.panel}"),
            ("panels", "/panels"), ("audit-trail", "/audit"),
            ("refused-uploads", "/rejected-uploads")]


def test_keyboard_alone_reaches_every_action(page: Any, demo_server: DemoServer) -> None:
    offline(page)
    sign_in(page, demo_server, "admin")
    for _name, path in _pages(demo_server):
        page.goto(f"{demo_server.url}{path}")
        missing = keyboard_missing(page)
        assert missing == [], (path, missing)


def test_axe_finds_no_serious_violation_and_every_page_is_shot(
        browser: Any, demo_server: DemoServer) -> None:
    require_axe()
    # The pages' CSP forbids inline scripts, so the test lets its own scanner in.
    context = browser.new_context(viewport={"width": 1280, "height": 900}, bypass_csp=True)
    page = context.new_page()
    try:
        offline(page)
        sign_in(page, demo_server, "admin")
        pages = [*_pages(demo_server), ("sign-in", "/sign-in")]
        for name, path in pages:
            if name == "sign-in":
                context.clear_cookies()
            page.goto(f"{demo_server.url}{path}")
            bad = axe_serious(page)
            assert bad == [], (path, bad)
            page.screenshot(path=str(shots(demo_server) / f"{name}-full.png"), full_page=True)
    finally:
        context.close()
