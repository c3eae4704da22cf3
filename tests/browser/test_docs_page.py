"""The API docs page in a real browser: it renders offline and works like a person uses it."""

from __future__ import annotations

import json
from typing import Any, get_args
from urllib.parse import urlsplit

import pytest

from app.schemas.panels import RiskLevel
from tests.browser.conftest import HOST, LiveServer

pytestmark = pytest.mark.browser

PANEL_PATH = "/api/v1/panels/{serial}"


def _operation(page: Any, method: str, path: str) -> Any:
    """The operation block for ``method path`` (exact path, so not ``.../{serial}/stack``)."""
    return page.locator(f".opblock.opblock-{method.lower()}").filter(
        has=page.locator(f'.opblock-summary-path[data-path="{path}"]')
    )


def _open_docs(page: Any, server: LiveServer) -> dict[str, list[Any]]:
    """Load /docs, recording every request, failure and JS error, and wait for Swagger UI."""
    seen: dict[str, list[Any]] = {"requests": [], "failed": [], "bad": [], "errors": []}
    page.on("request", lambda r: seen["requests"].append(r.url))
    page.on("requestfailed", lambda r: seen["failed"].append((r.url, r.failure)))
    page.on("response", lambda r: r.status >= 400 and seen["bad"].append((r.url, r.status)))
    page.on("pageerror", lambda e: seen["errors"].append(str(e)))
    # Anything not on the local server is refused, so the page can't quietly depend on it.
    page.context.route(
        "**/*",
        lambda route: route.continue_() if urlsplit(route.request.url).hostname == HOST
        else route.abort("internetdisconnected"),
    )
    page.goto(f"{server.url}/docs")
    # Swagger UI renders client side: wait for either the operations or its error panel.
    page.wait_for_selector(".swagger-ui .opblock, .swagger-ui .version-pragma, "
                           ".swagger-ui .errors-wrapper")
    if page.locator(".swagger-ui .opblock").count() == 0:
        pytest.fail("Swagger UI did not render the API: "
                    + " ".join(page.locator("#swagger-ui").inner_text().split()))
    return seen


def test_docs_render_offline(page: Any, live_server: LiveServer) -> None:
    seen = _open_docs(page, live_server)

    assert "stackledger" in page.title()
    title = page.locator(".swagger-ui .info .title")
    assert title.inner_text().split()[0] == "stackledger"
    for method, path in [("POST", "/api/v1/measurements"), ("GET", PANEL_PATH),
                         ("POST", "/api/v1/panels"), ("GET", "/api/v1/holds"),
                         ("GET", "/api/v1/health")]:
        op = _operation(page, method, path)
        op.wait_for()
        summary = " ".join(op.locator(".opblock-summary").inner_text().split())
        assert summary.startswith(f"{method} {path}"), summary
    page.wait_for_load_state("networkidle")

    assert seen["requests"], "no request recorded"
    offsite = [u for u in seen["requests"]
               if urlsplit(u).scheme != "data" and urlsplit(u).hostname != HOST]
    assert offsite == [], f"the docs page reaches beyond {HOST}: {offsite}"
    paths = {urlsplit(u).path for u in seen["requests"]}
    assert {"/docs", "/openapi.json", "/static/swagger/swagger-ui-bundle.js",
            "/static/swagger/swagger-ui.css"} <= paths, paths
    assert seen["failed"] == [] and seen["bad"] == [], (seen["failed"], seen["bad"])
    assert seen["errors"] == [], seen["errors"]


def test_try_get_panel_with_engineer_key(page: Any, live_server: LiveServer,
                                         tmp_path: Any) -> None:
    seen = _open_docs(page, live_server)

    # Authorize with the engineer key, as a person would.
    page.locator(".swagger-ui .auth-wrapper").get_by_role("button", name="Authorize").click()
    modal = page.locator(".swagger-ui .modal-ux")
    modal.wait_for()
    modal.locator("input[type=text], input[type=password]").first.fill(live_server.engineer_key)
    # Swagger UI 5 labels its buttons for screen readers ("Apply credentials", ...): match the
    # text a person sees instead of the accessible name.
    modal.locator("button", has_text="Authorize").last.click()
    modal.locator("button", has_text="Logout").wait_for()  # the key was taken
    modal.locator("button", has_text="Close").first.click()
    modal.wait_for(state="detached")

    # Expand GET /api/v1/panels/{serial}, try it out with the panel's serial.
    op = _operation(page, "GET", PANEL_PATH)
    op.locator(".opblock-summary-method").click()
    op.get_by_role("button", name="Try it out").click()
    op.get_by_placeholder("serial", exact=True).fill(live_server.serial)
    with page.expect_request(lambda r: urlsplit(r.url).path.startswith("/api/v1/panels/")
                             ) as sent:
        op.get_by_role("button", name="Execute").click()
    assert urlsplit(sent.value.url).path == f"/api/v1/panels/{live_server.serial}"
    assert sent.value.headers.get("authorization") == f"Bearer {live_server.engineer_key}"

    response = op.locator(".live-responses-table .response").first
    body_block = response.locator(".highlight-code pre").first  # the "Response body" block
    body_block.wait_for()
    assert response.locator(".response-col_status").inner_text().strip() == "200"
    body_text = body_block.inner_text()
    assert live_server.serial in body_text and "risk" in body_text, body_text
    body = json.loads(body_text)
    assert body["serial"] == live_server.serial
    assert body["product"] == live_server.product
    assert body["risk"] in get_args(RiskLevel), body

    response.scroll_into_view_if_needed()
    page.screenshot(path=str(tmp_path / "docs-try-it-out.png"))
    assert seen["errors"] == [], seen["errors"]
