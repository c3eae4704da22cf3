"""What the browser tests share: where screenshots go, an offline page, signing in, the
keyboard walk and the axe-core scan.

Screenshots go to $STACKLEDGER_SCREENSHOTS (the README's come from
``STACKLEDGER_SCREENSHOTS=docs/screenshots pytest tests/browser -k sqlite``), else to
build/screenshots/<database>/ (not tracked).
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any
from urllib.parse import urlsplit

import pytest

from tests.browser.conftest import HOST, DemoServer

ROOT = Path(__file__).resolve().parents[2]
AXE = ROOT / ".axe" / "node_modules" / "axe-core" / "axe.min.js"


def shots(server: DemoServer) -> Path:
    where = os.environ.get("STACKLEDGER_SCREENSHOTS")
    path = Path(where) if where else ROOT / "build" / "screenshots" / server.database
    path.mkdir(parents=True, exist_ok=True)
    return path


def offline(page: Any) -> list[str]:
    """Refuse anything not on the local server, and note JS errors."""
    errors: list[str] = []
    page.on("pageerror", lambda e: errors.append(str(e)))
    page.context.route(
        "**/*",
        lambda route: route.continue_() if urlsplit(route.request.url).hostname == HOST
        else route.abort("internetdisconnected"),
    )
    return errors


def sign_in(page: Any, server: DemoServer, role: str, path: str = "/board") -> None:
    page.goto(f"{server.url}{path}")
    page.wait_for_url("**/sign-in?next=**")
    page.fill("#key", server.keys[role])
    page.get_by_role("button", name="Sign in").click()
    page.wait_for_url(f"**{path}")


def keyboard_missing(page: Any) -> list[str]:
    """Every link, button, field and summary the page shows that Tab (and the arrows within a
    radio group) does not reach, as the start of its HTML. Folded sections are opened first,
    as a keyboard user opens them (Enter on their summary, which the walk also reaches)."""
    wanted = page.evaluate("""() => {
        document.querySelectorAll('details').forEach(d => { d.open = true; });
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
        if page.evaluate("() => document.activeElement.type === 'radio'"):
            for _r in range(3):
                page.keyboard.press("ArrowDown")
                reached.add(page.evaluate("() => document.activeElement.dataset.kbd"))
    missing: list[str] = page.evaluate(
        "ks => [...document.querySelectorAll('[data-kbd]')]"
        ".filter(e => !ks.includes(e.dataset.kbd)).map(e => e.outerHTML.slice(0, 80))",
        sorted(reached))
    return missing


def require_axe() -> None:
    if not AXE.is_file():
        if os.environ.get("CI"):
            pytest.fail(f"{AXE} is missing under CI (.ci/run installs axe-core from npm)")
        pytest.skip("axe-core not installed: npm install --prefix .axe axe-core@4")


def axe_serious(page: Any) -> list[tuple[str, str, list[Any]]]:
    """axe-core's serious and critical violations on the page (the context must bypass the
    pages' CSP, which forbids the inline scanner)."""
    page.add_script_tag(path=str(AXE))
    result = page.evaluate("async () => await axe.run(document, "
                           "{resultTypes: ['violations']})")
    return [(v["id"], v["impact"], [n["target"] for n in v["nodes"][:3]])
            for v in result["violations"] if v["impact"] in ("serious", "critical")]
