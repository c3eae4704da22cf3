"""The pages: the shift board at 300 and 30,000 panels, a panel page against its JSON answer,
and the weight of each page.

    .venv/bin/python benchmarks/pages.py                      # SQLite and PostgreSQL
    .venv/bin/python benchmarks/pages.py --skip-postgres

1. Page weight, panel page and analysis pages: the demo scenario (sample_data/) loaded
   through the services.
   Signed in through the sign-in form with the demo supervisor key (fastapi.testclient), each
   page's HTML bytes plus what it loads (the style sheet and the icon): uncached weight. For the
   worst held panel, GET /panels/{serial} (the page) against GET /api/v1/panels/{serial} (its
   JSON) and against the three JSON answers the page draws on (panel, stack, sites): best of
   --repeat, server side through TestClient, as a ratio. The analysis and lot pages (tool
   fingerprints, EWMA charts, drift alarms, FTB shares, lots, one lot): best of --repeat each.
2. Shift board: a second store grown with copies of the demo's states and holds (the builder of
   benchmarks/holds.py: 10 % of panels with an open hold) to --small, then --large panels. GET
   /board (its first page, 50 holds) best of --repeat at each size; the ratio large / small
   (target <= 2).

Prints figures; asserts nothing.
"""

from __future__ import annotations

import argparse
import re
import sys
import time
import warnings
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parent))

import _data
from holds import HoldStore, store, templates

from app.demo.loader import load_into
from app.main import create_app
from app.services import holds, keys

TARGET_RATIO = 2.0
WEIGHT_AIM_KB = 300
_CSRF = re.compile(r'name="csrf" value="([^"]+)"')
_LINKED = re.compile(r'(?:href|src)="(/static/[^"]+)"')


def signed_in(db: Any, key: str) -> Any:
    warnings.filterwarnings("ignore", message=".*httpx.*starlette.testclient.*")
    from fastapi.testclient import TestClient

    app = create_app(db)
    app.state.session_secret = b"benchmark-secret"
    client = TestClient(app, follow_redirects=False)
    form = client.get("/sign-in")
    r = client.post("/sign-in", data={"key": key, "csrf": _CSRF.search(form.text).group(1)})
    assert r.status_code == 303, r.text
    return client


def best_ms(client: Any, path: str, repeat: int) -> float:
    for _ in range(2):  # warm-up
        assert client.get(path).status_code == 200, path
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        r = client.get(path)
        times.append(time.perf_counter() - t)
        assert r.status_code == 200, path
    return 1e3 * min(times)


def weight(client: Any, path: str) -> tuple[int, int]:
    """(HTML bytes, HTML plus the static files it links) of one uncached page load."""
    html = client.get(path)
    assert html.status_code == 200, path
    linked = sum(len(client.get(p).content) for p in set(_LINKED.findall(html.text)))
    return len(html.content), len(html.content) + linked


def analysis_pages(lot: str) -> dict[str, str]:
    """The engineer's analysis pages and the lot pages, on the demo's first product."""
    return {"lots": "/lots", f"lot {lot}": f"/lots/{lot}",
            "tool fingerprints": "/analysis/fingerprints", "EWMA charts": "/analysis/drift",
            "drift alarms": "/analysis/alarms", "FTB shares": "/analysis/shares"}


def demo_pages(db: Any, args: argparse.Namespace) -> tuple[dict[str, Any], list, list]:
    t = time.perf_counter()
    demo_keys = load_into(db)
    load_s = time.perf_counter() - t
    client = signed_in(db, demo_keys["supervisor"])
    held = holds.list_holds(db=db, limit=1).holds[0]
    admin = signed_in(db, demo_keys["admin"])
    pages = {"sign-in": "/sign-in", "shift board": "/board", f"panel {held.panel}":
             f"/panels/{held.panel}", "panels": "/panels", "audit trail": "/audit",
             "refused uploads": "/rejected-uploads", **analysis_pages(held.lot)}
    weights = {name: weight(admin, path) for name, path in pages.items()}
    analysis_ms = {name: best_ms(client, path, args.repeat)
                   for name, path in analysis_pages(held.lot).items()}
    bearer = {"Authorization": f"Bearer {demo_keys['engineer']}"}
    from fastapi.testclient import TestClient

    api = TestClient(create_app(db))

    def json_ms(paths: list[str]) -> float:
        for p in paths:
            assert api.get(p, headers=bearer).status_code == 200, p
        best = float("inf")
        for _ in range(args.repeat):
            t0 = time.perf_counter()
            for p in paths:
                api.get(p, headers=bearer)
            best = min(best, time.perf_counter() - t0)
        return 1e3 * best

    base = f"/api/v1/panels/{held.panel}"
    out = {"load_s": load_s, "panel": held.panel, "weights": weights, "analysis_ms": analysis_ms,
           "page_ms": best_ms(client, f"/panels/{held.panel}", args.repeat),
           "json_ms": json_ms([base]),
           "json3_ms": json_ms([base, f"{base}/stack", f"{base}/sites?side=B&layer="
                                f"{max(held.layers_reached['A'], held.layers_reached['B'])}"])}
    states, hold_rows = templates(db)
    return out, states, hold_rows


def board(db: Any, states: list, hold_rows: list, args: argparse.Namespace) -> dict[str, Any]:
    hs = HoldStore(db, states, hold_rows, args.seed)
    key, _ = keys.create(db=db, role="supervisor", label="bench supervisor")
    client = signed_in(db, key)
    out: dict[str, Any] = {}
    for label, n in (("small", args.small), ("large", args.large)):
        fill_s = hs.grow_to(n)
        out[label] = {"panels": hs.panels, "open_holds": hs.open_holds, "fill_s": fill_s,
                      "best_ms": best_ms(client, "/board", args.repeat),
                      "rows": client.get("/board").text.count("<tr data-panel=")}
    out["ratio"] = out["large"]["best_ms"] / out["small"]["best_ms"]
    return out


def run(backend: str, tmp: Path, args: argparse.Namespace) -> float:
    print(f"\n== {backend}")
    with store(backend, tmp, "demo") as db:
        d, states, hold_rows = demo_pages(db, args)
    print(f"  demo loaded in {d['load_s']:.1f} s")
    print("  page weight, uncached (HTML + style sheet + icon):")
    for name, (html, total) in d["weights"].items():
        print(f"    {name:<26} {html / 1024:6.1f} KiB HTML, {total / 1024:6.1f} KiB in all "
              f"(aim < {WEIGHT_AIM_KB} KB: {'met' if total < WEIGHT_AIM_KB * 1000 else 'NOT met'})")
    print("  analysis and lot pages, server time (best of --repeat, supervisor):")
    for name, ms in d["analysis_ms"].items():
        print(f"    {name:<26} {ms:7.1f} ms")
    print(f"  panel {d['panel']}: page best {d['page_ms']:.1f} ms; JSON panel {d['json_ms']:.1f} ms"
          f" (ratio {d['page_ms'] / d['json_ms']:.1f}); JSON panel + stack + sites "
          f"{d['json3_ms']:.1f} ms (ratio {d['page_ms'] / d['json3_ms']:.1f})")
    with store(backend, tmp, "board") as db:
        b = board(db, states, hold_rows, args)
    for label in ("small", "large"):
        m = b[label]
        print(f"  GET /board, {m['panels']:>6,} panels, {m['open_holds']:>5,} open holds "
              f"(filled in {m['fill_s']:.1f} s): best {m['best_ms']:.1f} ms, "
              f"{m['rows']} rows on the first page")
    verdict = "met" if b["ratio"] <= TARGET_RATIO else "NOT met"
    print(f"  ratio {args.large:,} / {args.small:,} panels: {b['ratio']:.2f} "
          f"(target <= {TARGET_RATIO:g}: {verdict})")
    return float(b["ratio"])


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--small", type=int, default=300)
    ap.add_argument("--large", type=int, default=30_000)
    ap.add_argument("--repeat", type=int, default=15)
    ap.add_argument("--seed", type=int, default=2026)
    ap.add_argument("--skip-sqlite", action="store_true")
    ap.add_argument("--skip-postgres", action="store_true")
    args = ap.parse_args()
    print(f"stackledger pages benchmark: seed {args.seed}, python {sys.version.split()[0]}")
    summary = []
    with _data.tempdir() as tmp_name:
        tmp = Path(tmp_name)
        if not args.skip_sqlite:
            summary.append(("SQLite", run("SQLite", tmp, args)))
        if not args.skip_postgres:
            why = _data.pg_available()
            if why:
                print(f"\n== PostgreSQL skipped: {why}")
            else:
                summary.append(("PostgreSQL", run("PostgreSQL", tmp, args)))
    print("\n== summary")
    for name, ratio in summary:
        verdict = "met" if ratio <= TARGET_RATIO else "NOT met"
        print(f"  {name:<11} shift board ratio {ratio:.2f} (target <= {TARGET_RATIO:g}: {verdict})")


if __name__ == "__main__":
    main()
