"""The engineer's analysis pages and the lot summary in Debian's chromium, on the demo scenario,
on both databases: each page opens, its charts carry one element per figure of the service's
report, links lead where they say, the keyboard reaches every link, axe-core finds no serious
or critical violation, an uploader key neither sees nor opens them, and each page is shot."""

from __future__ import annotations

from typing import Any

import pytest

from app.schemas.analysis import AnalysisFilter
from app.services import analysis_drift, analysis_ftb, analysis_lots, holds, panels, products
from app.views.drift_charts import is_alarm
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

NEW_PAGES = ("/lots", "/analysis/fingerprints", "/analysis/drift", "/analysis/alarms",
             "/analysis/shares")


def _first_product(server: DemoServer) -> Any:
    return products.list_products(db=server.db).items[0]


def _lot_of_first_hold(server: DemoServer) -> str:
    return holds.list_holds(db=server.db, limit=1).holds[0].lot


def test_fingerprint_page_draws_one_arrow_per_check_point(page: Any,
                                                          demo_server: DemoServer) -> None:
    errors = offline(page)
    sign_in(page, demo_server, "engineer", "/analysis/fingerprints")
    product = _first_product(demo_server)
    assert page.locator("#f-product").input_value() == product.code  # the default product
    for kind in ("mean", "difference"):
        assert page.locator(f"#fingerprint-{kind} g.arrows line").count() == len(
            product.check_points_mm)
        assert page.locator(f"#fingerprint-{kind} .scale-arrow line").count() == 1
        assert page.locator(f"#fingerprint-{kind} rect.panel-outline").count() == 1
    assert page.locator("#fingerprint-terms tbody tr").count() == product.model_terms
    page.screenshot(path=str(shots(demo_server) / "tool-fingerprints.png"), full_page=True)
    # Another tool, side B, one layer: the form's choice is drawn.
    page.select_option("#f-side", "B")
    page.select_option("#f-layer", "3")
    page.get_by_role("button", name="Show").click()
    page.wait_for_url("**/analysis/fingerprints?*layer=3*")
    assert "side B, layer 3" in page.locator("#fingerprint-terms caption").inner_text()
    assert page.locator("#fingerprint-mean g.arrows line").count() == len(
        product.check_points_mm)
    assert errors == []


def test_ewma_charts_carry_every_point_limit_and_alarm(page: Any,
                                                       demo_server: DemoServer) -> None:
    errors = offline(page)
    product = _first_product(demo_server)
    report = analysis_drift.tool_drift(db=demo_server.db,
                                       filters=AnalysisFilter(product=product.code))
    assert report.alarms, "the demo scenario should make a tool drift"
    sign_in(page, demo_server, "engineer", "/analysis/drift")
    drawn = page.locator("svg.ewma")
    assert drawn.count() == min(len(report.charts), 8)
    for n in range(drawn.count()):
        chart = report.charts[n]
        svg = drawn.nth(n)
        assert svg.locator(".ewma-point").count() == len(chart.points)
        assert svg.locator("circle.subgroup-mean").count() == len(chart.points)
        assert svg.locator(".limit-line").count() == 2
        assert svg.locator("line.centre-line").count() == 1
        alarms = sum(is_alarm(p) for p in chart.points)
        assert svg.locator("path.alarm-mark").count() == alarms > 0  # shape ...
        assert svg.locator("text.alarm-text").count() >= 1  # ... and text
        assert svg.locator("text", has_text="(µm)").count() + svg.locator(
            "text", has_text="(ppm)").count() + svg.locator("text", has_text="(µrad)").count() \
            + svg.locator("text", has_text="(µm/m²)").count() == 1
        assert svg.locator("text", has_text="UTC date").count() == 1
    page.screenshot(path=str(shots(demo_server) / "ewma-charts.png"), full_page=True)
    assert errors == []


def test_alarm_list_links_to_the_chart_and_the_lots(page: Any, demo_server: DemoServer) -> None:
    errors = offline(page)
    product = _first_product(demo_server)
    report = analysis_drift.tool_drift(db=demo_server.db,
                                       filters=AnalysisFilter(product=product.code))
    sign_in(page, demo_server, "engineer", "/analysis/alarms")
    rows = page.locator("#alarms tbody tr")
    assert rows.evaluate_all("rs => rs.map(r => r.dataset.alarm)") == [
        f"{a.exposure_tool}-{a.side}-{a.term}" for a in report.alarms]
    page.screenshot(path=str(shots(demo_server) / "drift-alarms.png"), full_page=True)
    first = report.alarms[0]
    lots = rows.first.locator("td.lots a[href^='/lots/']")
    assert lots.count() >= 1
    lot = lots.first.inner_text()
    rows.first.locator("td a").first.click()
    page.wait_for_url(f"**/analysis/drift?*term={first.term}*")
    chart = page.locator("svg.ewma")
    assert chart.count() == 1
    assert chart.get_attribute("id") == page.url.rsplit("#", 1)[1]
    page.go_back()
    page.locator("#alarms tbody tr").first.locator("td.lots a[href^='/lots/']").first.click()
    page.wait_for_url(f"**/lots/{lot}")
    assert page.locator("h1").inner_text().startswith(f"Lot {lot}")
    assert errors == []


def test_shares_draw_one_bar_per_share(page: Any, demo_server: DemoServer) -> None:
    errors = offline(page)
    product = _first_product(demo_server)
    report = analysis_ftb.ftb_shares(db=demo_server.db,
                                     filters=AnalysisFilter(product=product.code))
    sign_in(page, demo_server, "engineer", "/analysis/shares")
    assert page.locator("#shares-layer-side rect.bar").count() == len(report.by_layer_side)
    assert page.locator("#shares-tool rect.bar").count() == len(report.by_exposure_tool)
    assert page.locator("#shares-lot rect.bar").count() == sum(
        len(lot.by_exposure_tool) for lot in report.by_lot)
    assert page.locator("#shares-components rect.bar").count() == 4
    values = page.locator("#shares-tool rect.bar").evaluate_all(
        "rs => rs.map(r => Number(r.dataset.value))")
    assert sum(values) == pytest.approx(100.0, abs=0.1)  # shares add to 1 (the service's rule)
    for ident in ("shares-layer-side", "shares-tool", "shares-lot", "shares-components"):
        assert page.locator(f"#{ident} text", has_text="(%)").count() == 1
    page.screenshot(path=str(shots(demo_server) / "ftb-shares.png"), full_page=True)
    assert errors == []


def test_lot_summary_from_the_board_and_the_panels_list(page: Any,
                                                        demo_server: DemoServer) -> None:
    errors = offline(page)
    lot = _lot_of_first_hold(demo_server)
    sign_in(page, demo_server, "supervisor")
    page.locator("#holds tbody tr").first.get_by_role("link", name=lot, exact=True).click()
    page.wait_for_url(f"**/lots/{lot}")
    members = panels.list_panels(db=demo_server.db, lot=lot, limit=500).items
    product = products.get(db=demo_server.db, code=members[0].product)
    measured = [p for p in members if p.layers_reached.A or p.layers_reached.B]
    counts = page.locator("#lot-histogram rect.bin").evaluate_all(
        "rs => rs.map(r => Number(r.dataset.count))")
    assert sum(counts) == len(measured)
    over = sum(p.ftb_current_um > product.ftb_limit_um for p in measured)
    assert f"{over} above the limit" in page.locator("#lot-histogram desc").text_content()
    assert page.locator("#lot-histogram line.limit-line").count() == 1
    assert page.locator("#lot-histogram text", has_text="(µm)").count() == 1
    assert sorted(page.locator("table.lot-panels tbody tr").evaluate_all(
        "rs => rs.map(r => r.dataset.panel)")) == sorted(p.serial for p in members)
    for level in ("over_limit", "at_risk", "watch", "clear"):
        shown = page.locator(f".level-counts li[data-level={level}] .count").inner_text()
        assert int(shown) == sum(p.risk == level for p in members)
    row = analysis_lots.lot_summary(db=demo_server.db, filters=AnalysisFilter(
        product=product.code, lot=lot)).lots[0]
    assert f"{row.forecast_within_limit * 100:.1f} %" in page.locator(
        "#forecast-yield").inner_text()
    page.screenshot(path=str(shots(demo_server) / "lot.png"), full_page=True)
    page.locator("table.lot-panels a").first.click()
    page.wait_for_url("**/panels/*")
    page.goto(f"{demo_server.url}/panels?lot={lot}")
    page.locator("#panels tbody tr").first.get_by_role("link", name=lot, exact=True).click()
    page.wait_for_url(f"**/lots/{lot}")
    page.goto(f"{demo_server.url}/lots")
    assert page.locator("#lots tbody tr").count() == len(analysis_lots.lot_summary(
        db=demo_server.db, filters=AnalysisFilter(product=product.code)).lots)
    page.screenshot(path=str(shots(demo_server) / "lots.png"), full_page=True)
    assert errors == []


def test_keyboard_reaches_every_link_and_the_nav_leads_to_each_page(
        page: Any, demo_server: DemoServer) -> None:
    offline(page)
    sign_in(page, demo_server, "engineer")
    lot = _lot_of_first_hold(demo_server)
    for path in (*NEW_PAGES, f"/lots/{lot}"):
        page.goto(f"{demo_server.url}{path}")
        assert keyboard_missing(page) == [], path
    # From the nav by keyboard alone: Tab to the link, Enter.
    for path in NEW_PAGES:
        page.goto(f"{demo_server.url}/board")
        link = page.locator(f"header nav a[href='{path}']")
        for _ in range(40):
            page.keyboard.press("Tab")
            if page.evaluate("() => document.activeElement.getAttribute('href')") == path:
                break
        page.keyboard.press("Enter")
        page.wait_for_url(f"**{path}")
        assert link.count() == 1


def test_axe_finds_no_serious_violation(browser: Any, demo_server: DemoServer) -> None:
    require_axe()
    context = browser.new_context(viewport={"width": 1280, "height": 900}, bypass_csp=True)
    page = context.new_page()
    try:
        offline(page)
        sign_in(page, demo_server, "engineer")
        for path in (*NEW_PAGES, f"/lots/{_lot_of_first_hold(demo_server)}"):
            page.goto(f"{demo_server.url}{path}")
            assert axe_serious(page) == [], path
    finally:
        context.close()


def test_an_uploader_key_neither_sees_nor_opens_them(page: Any, demo_server: DemoServer) -> None:
    offline(page)
    sign_in(page, demo_server, "uploader", "/rejected-uploads")
    nav = page.locator("header nav a").evaluate_all("as => as.map(a => a.pathname)")
    assert nav == ["/rejected-uploads"]
    for path in (*NEW_PAGES, f"/lots/{_lot_of_first_hold(demo_server)}"):
        answer = page.goto(f"{demo_server.url}{path}")
        assert answer is not None and answer.status == 403, path
        assert "role 'uploader' may not" in page.locator("main").inner_text()
