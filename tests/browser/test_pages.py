"""The pages in Debian's chromium, on the demo scenario, on both databases: sign-in and out,
the shift board's order, dispositions end to end, what an engineer may not do, CSRF, the
charts' elements, keyboard-only reach, an axe-core scan and a screenshot of every page.

Screenshots go to $STACKLEDGER_SCREENSHOTS (the README's come from
``STACKLEDGER_SCREENSHOTS=docs/screenshots pytest tests/browser/test_pages.py -k sqlite``),
else to build/screenshots/<database>/ (not tracked).
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any
from urllib.parse import urlsplit

import pytest

from app.services import holds, panels, products
from tests.browser.conftest import HOST, DemoServer

pytestmark = pytest.mark.browser

ROOT = Path(__file__).resolve().parents[2]
AXE = ROOT / ".axe" / "node_modules" / "axe-core" / "axe.min.js"
SUPERVISOR, ENGINEER = "supervisor", "engineer"


def _shots(server: DemoServer) -> Path:
    where = os.environ.get("STACKLEDGER_SCREENSHOTS")
    path = Path(where) if where else ROOT / "build" / "screenshots" / server.database
    path.mkdir(parents=True, exist_ok=True)
    return path


def _offline(page: Any) -> list[str]:
    """Refuse anything not on the local server, and note JS errors."""
    errors: list[str] = []
    page.on("pageerror", lambda e: errors.append(str(e)))
    page.context.route(
        "**/*",
        lambda route: route.continue_() if urlsplit(route.request.url).hostname == HOST
        else route.abort("internetdisconnected"),
    )
    return errors


def _sign_in(page: Any, server: DemoServer, role: str, path: str = "/board") -> None:
    page.goto(f"{server.url}{path}")
    page.wait_for_url("**/sign-in?next=**")
    page.fill("#key", server.keys[role])
    page.get_by_role("button", name="Sign in").click()
    page.wait_for_url(f"**{path}")


def _open_holds(server: DemoServer) -> list[Any]:
    return holds.list_holds(db=server.db, limit=50).holds


def test_sign_in_and_sign_out(page: Any, demo_server: DemoServer) -> None:
    errors = _offline(page)
    page.goto(f"{demo_server.url}/board")
    page.wait_for_url("**/sign-in?next=/board")
    page.screenshot(path=str(_shots(demo_server) / "sign-in.png"))
    page.fill("#key", "sl_00000000_not-a-key")
    page.get_by_role("button", name="Sign in").click()
    assert "unknown or revoked" in page.locator(".alert").inner_text()
    _sign_in(page, demo_server, SUPERVISOR)
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
    errors = _offline(page)
    _sign_in(page, demo_server, SUPERVISOR)
    expected = _open_holds(demo_server)
    assert len(expected) >= 10, "the demo scenario should hold panels"
    rows = page.locator("#holds tbody tr")
    assert rows.evaluate_all("rs => rs.map(r => r.dataset.panel)") == [h.panel for h in expected]
    severities = [h.severity for h in expected]
    assert severities == sorted(severities, reverse=True)
    first = rows.first.inner_text()
    assert expected[0].panel in first and expected[0].lot in first
    assert "decisions for the fab's own quality procedures" in page.locator(".caution").inner_text()
    page.screenshot(path=str(_shots(demo_server) / "shift-board.png"))
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
    page.screenshot(path=str(_shots(demo_server) / "shift-board-print.png"))
    assert page.locator(".filters").is_hidden()
    assert errors == []


def test_charts_carry_their_elements(page: Any, demo_server: DemoServer) -> None:
    _offline(page)
    held = _open_holds(demo_server)[0]
    _sign_in(page, demo_server, ENGINEER, f"/panels/{held.panel}")
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
    page.screenshot(path=str(_shots(demo_server) / "panel.png"), full_page=True)
    page.locator(".charts").screenshot(path=str(_shots(demo_server) / "panel-charts.png"))


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
        page.screenshot(path=str(_shots(server) / "confirm.png"))
    page.get_by_role("button", name=f"Confirm {action}").click()
    page.wait_for_url(f"**/panels/{panel}?disposed={action}")
    row = page.locator("#holds-of-panel tbody tr").first.inner_text()
    assert "closed" in row and action in row and note in row


def test_supervisor_releases_scraps_and_reworks(page: Any, demo_server: DemoServer) -> None:
    errors = _offline(page)
    _sign_in(page, demo_server, SUPERVISOR)
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
    page.screenshot(path=str(_shots(demo_server) / "audit.png"))
    board = page.goto(f"{demo_server.url}/board")
    assert board is not None and board.ok
    listed = page.locator("#holds tbody tr").evaluate_all("rs => rs.map(r => r.dataset.panel)")
    assert not set(targets) & set(listed)
    assert errors == []


def test_engineer_sees_no_form_and_forged_posts_are_refused(page: Any,
                                                           demo_server: DemoServer) -> None:
    _offline(page)
    held = _open_holds(demo_server)[0]
    _sign_in(page, demo_server, ENGINEER, f"/panels/{held.panel}")
    assert page.locator("#disposition").count() == 0
    assert "read-only" in page.locator("#hold-h + p + p").inner_text()
    csrf = page.locator("header form input[name=csrf]").input_value()
    forged = page.request.post(f"{demo_server.url}/holds/{held.id}/disposition", form={
        "csrf": csrf, "step": "confirm", "action": "release", "note": "not mine to give"})
    assert forged.status == 403 and "engineer" in forged.text()
    assert holds.get(db=demo_server.db, hold_id=held.id).state == "open"
    page.context.clear_cookies()
    _sign_in(page, demo_server, SUPERVISOR, f"/panels/{held.panel}")
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
    _offline(page)
    _sign_in(page, demo_server, "admin")
    for _name, path in _pages(demo_server):
        page.goto(f"{demo_server.url}{path}")
        wanted = page.evaluate("""() => {
            const els = [...document.querySelectorAll(
              'a[href], button, input:not([type=hidden]), select, textarea, summary')]
              .filter(e => e.getClientRects().length > 0 || e.classList.contains('skip'));
            els.forEach((e, i) => e.dataset.kbd = String(i));
            return els.length; }""")
        reached: set[str] = set()
        for _ in range(wanted * 3 + 5):  # radios are one stop: arrows move within the group
            page.keyboard.press("Tab")
            key = page.evaluate("() => document.activeElement.dataset.kbd || ''")
            if key:
                reached.add(key)
            radios = page.evaluate("() => document.activeElement.type === 'radio'")
            if radios:
                for _r in range(3):
                    page.keyboard.press("ArrowDown")
                    reached.add(page.evaluate("() => document.activeElement.dataset.kbd"))
        missing = page.evaluate("ks => [...document.querySelectorAll('[data-kbd]')]"
                                ".filter(e => !ks.includes(e.dataset.kbd))"
                                ".map(e => e.outerHTML.slice(0, 80))", sorted(reached))
        assert missing == [], (path, missing)


def test_axe_finds_no_serious_violation_and_every_page_is_shot(
        browser: Any, demo_server: DemoServer) -> None:
    if not AXE.is_file():
        if os.environ.get("CI"):
            pytest.fail(f"{AXE} is missing under CI (.ci/run installs axe-core from npm)")
        pytest.skip("axe-core not installed: npm install --prefix .axe axe-core@4")
    # The pages' CSP forbids inline scripts, so the test lets its own scanner in.
    context = browser.new_context(viewport={"width": 1280, "height": 900}, bypass_csp=True)
    page = context.new_page()
    try:
        _offline(page)
        _sign_in(page, demo_server, "admin")
        pages = [*_pages(demo_server), ("sign-in", "/sign-in")]
        for name, path in pages:
            if name == "sign-in":
                context.clear_cookies()
            page.goto(f"{demo_server.url}{path}")
            page.add_script_tag(path=str(AXE))
            result = page.evaluate("async () => await axe.run(document, "
                                   "{resultTypes: ['violations']})")
            bad = [(v["id"], v["impact"], [n["target"] for n in v["nodes"][:3]])
                   for v in result["violations"] if v["impact"] in ("serious", "critical")]
            assert bad == [], (path, bad)
            page.screenshot(path=str(_shots(demo_server) / f"{name}-full.png"), full_page=True)
    finally:
        context.close()
