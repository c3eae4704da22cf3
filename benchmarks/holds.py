"""The forecast's share of one POST /api/v1/measurements, and GET /api/v1/holds at 300 and 30,000
panels.

Targets (the issue): the share of the forecast in the cost of one POST /api/v1/measurements, and
the first page of GET /api/v1/holds with 300 and with 30,000 panels in the store (the ratio; aim
for at most 2).

    .venv/bin/python benchmarks/holds.py                      # SQLite and PostgreSQL
    .venv/bin/python benchmarks/holds.py --skip-postgres --profile

1. Forecast share: a store with a product history (--history-panels panels, all 24 layers, through
   import_csv), then --posts POSTs through fastapi.testclient.TestClient(create_app(db)) with a
   tool key (layers 1..5 of new panels, layer by layer as a lot goes through the line, after a
   few warm-up posts that also learn the history). app.services.panel_estimate.forecast_final,
   panel_estimate.compute (the estimate) and measurements.accept are wrapped to sum their time
   during
   the posts.
2. Hold list: a second store with --small panels, ~10 % of them with an open hold (and ~3 % with
   a released one), then grown to --large panels. Panels, lots, panel_states and holds go in
   through SQLAlchemy Core inserts for speed; their values are copies of the states and holds that
   the services produced in store 1, under new serials and ids. GET /api/v1/holds (first page, the
   route's default of 50 holds) with an engineer key: best of --repeat, plus the number of
   SQL statements one GET runs.

Each store is a throwaway database (SQLite in a temp dir; PostgreSQL CREATE DATABASE with a
random name, dropped WITH (FORCE) at the end), migrated with app.store.migrate.upgrade. Prints
figures; asserts nothing.
"""

from __future__ import annotations

import argparse
import contextlib
import cProfile
import io
import pstats
import statistics
import sys
import time
import uuid
from collections.abc import Iterator
from datetime import timedelta
from pathlib import Path
from typing import Any

import numpy as np
from sqlalchemy import event, func, insert, select

sys.path.insert(0, str(Path(__file__).resolve().parent))

import _data
from _data import Timer

from app.db import Database
from app.main import create_app
from app.services import history, keys, measurements, panel_estimate
from app.store.tables import Hold, Lot, Panel, PanelEstimate, Product

TARGET_RATIO = 2.0


@contextlib.contextmanager
def store(backend: str, tmp: Path, name: str) -> Iterator[Database]:
    cm = _data.pg_url() if backend == "PostgreSQL" else _data.sqlite_url(tmp, f"{name}.db")
    with cm as url:
        db = _data.migrated(url)
        try:
            yield db
        finally:
            db.close()


def client_for(db: Database) -> Any:
    import warnings

    warnings.filterwarnings("ignore", message=".*httpx.*starlette.testclient.*")
    from fastapi.testclient import TestClient

    return TestClient(create_app(db), raise_server_exceptions=True)


# ----------------------------------------------------------------------------- 1. forecast share

def forecast_share(db: Database, tmp: Path, args: argparse.Namespace) -> dict[str, Any]:
    hist = _data.serials(args.history_panels, "HP")
    n_post_panels = max(1, -(-args.posts // 10))
    post = _data.serials(n_post_panels, "NP")
    warm = _data.serials(1, "WU")
    _data.register(db, hist + post + warm)
    path = tmp / "history.csv"
    _data.write_csv(path, hist, seed=args.seed, drift_share=0.15)
    from app.services import imports

    t = time.perf_counter()
    with path.open("rb") as f:
        imports.import_csv(db=db, stream=f, name="history.csv", principal_label="bench",
                           owner=0)
    setup_s = time.perf_counter() - t

    tool_key, _ = keys.create(db=db, role="uploader", label="bench tool")
    headers = {"Authorization": f"Bearer {tool_key}"}
    client = client_for(db)

    def body_list(names: list[str], seed: int) -> list[dict[str, Any]]:
        ms = list(_data.measurements(names, layers=5, seed=seed, drift_share=0.2))
        ms.sort(key=lambda m: (m["layer"], m["panel"], m["side"]))  # layer by layer
        return [_data.post_body(m) for m in ms]

    for b in body_list(warm, args.seed + 1)[:4]:  # warm-up: app, caches, history
        r = client.post("/api/v1/measurements", json=b, headers=headers)
        assert r.status_code == 201, r.text
    bodies = body_list(post, args.seed + 2)[: args.posts]

    timer = Timer()
    timer.wrap(panel_estimate, "forecast_final")
    timer.wrap(panel_estimate, "compute")
    timer.wrap(measurements, "accept")
    timer.wrap(history, "learn")
    per_post = []
    try:
        for b in bodies:
            t = time.perf_counter()
            r = client.post("/api/v1/measurements", json=b, headers=headers)
            per_post.append(time.perf_counter() - t)
            assert r.status_code == 201, r.text
    finally:
        timer.restore()
    with db.transaction() as session:
        n_holds = session.scalar(select(func.count()).select_from(Hold))
    total = sum(per_post)
    s = timer.seconds
    return {
        "setup_s": setup_s, "posts": len(per_post), "post_mean_ms": 1e3 * total / len(per_post),
        "post_median_ms": 1e3 * statistics.median(per_post),
        "accept_ms": 1e3 * s.get("accept", 0.0) / len(per_post),
        "compute_ms": 1e3 * s.get("compute", 0.0) / len(per_post),
        "forecast_ms": 1e3 * s.get("forecast_final", 0.0) / len(per_post),
        "learn_calls": timer.calls.get("learn", 0), "learn_s": s.get("learn", 0.0),
        "share_post": s.get("forecast_final", 0.0) / total,
        "share_accept": s.get("forecast_final", 0.0) / s["accept"] if s.get("accept") else 0.0,
        "holds_in_store": n_holds,
    }


# ----------------------------------------------------------------------------- 2. hold list

def _row(obj: Any) -> dict[str, Any]:
    return {c.key: getattr(obj, c.key) for c in obj.__table__.columns}


def templates(db: Database) -> tuple[list[dict[str, Any]], list[dict[str, Any]]]:
    """States and automatic holds that the services produced, as column dicts."""
    with db.transaction() as session:
        states = [_row(s) for s in session.scalars(
            select(PanelEstimate).order_by(PanelEstimate.panel))]
        holds = [_row(h) for h in session.scalars(select(Hold).order_by(Hold.panel))]
    if not holds:  # no panel of the history went on hold: make one like apply_automatic does
        worst = max(states, key=lambda st: st["ftb_worst_um"])
        holds = [{
            "panel": worst["panel"], "id": uuid.uuid4(), "state": "open", "kind": "automatic",
            "rule": worst["risk_rule"], "severity": 3, "reason": " ".join(worst["reasons"]),
            "figures": {"ftb_worst_um": round(worst["ftb_worst_um"], 3),
                        "p_exceed": worst["p_exceed"], "risk": worst["risk"]},
            "held_at": worst["updated_at"], "held_by": "stackledger (automatic)",
            "disposition": None, "disposition_note": None, "disposed_at": None,
            "disposed_by": None,
        }]
    return states, holds


class HoldStore:
    """A store grown with copies of template states and holds, 25 panels a lot."""

    def __init__(self, db: Database, states: list[dict[str, Any]], holds: list[dict[str, Any]],
                 seed: int) -> None:
        from app.schemas.products import ProductCreate
        from app.services import products

        self.db, self.states, self.holds = db, states, holds
        self.rng = np.random.default_rng(seed)
        products.create(db=db, data=ProductCreate(**_data.PRODUCT), actor="bench")
        with db.transaction() as session:
            self.product_id = session.scalars(select(Product.id)).one()
        self.panels = 0
        self.open_holds = 0
        self.lots: dict[int, int] = {}

    def grow_to(self, n: int, batch: int = 5000) -> float:
        t = time.perf_counter()
        while self.panels < n:
            self._add(min(batch, n - self.panels))
        return time.perf_counter() - t

    def _add(self, count: int) -> None:
        start = self.panels + 1
        lots, panels, states, holds = [], [], [], []
        # Exactly 10 % of each batch with an open hold and 3 % with a released one.
        draw = self.rng.permutation(count) / count
        pick_state = self.rng.integers(0, len(self.states), count)
        pick_hold = self.rng.integers(0, len(self.holds), count)
        hours = self.rng.uniform(0, 24 * 30, count)
        for j in range(count):
            i = start + j
            serial = f"HL{i:06d}"
            lot_no = (i - 1) // 25 + 1
            if lot_no not in self.lots:
                self.lots[lot_no] = lot_no
                lots.append({"id": lot_no, "code": f"HL-LOT{lot_no:05d}",
                             "product_id": self.product_id,
                             "created_at": _data.T0 + timedelta(hours=float(lot_no))})
            st = dict(self.states[pick_state[j]], panel=serial,
                      updated_at=_data.T0 + timedelta(hours=float(hours[j])))
            status = "complete" if len(st["layers_a"]) == len(st["layers_b"]) == 12 \
                else "in_process"
            if draw[j] < 0.13:  # 10 % open, 3 % released
                h = self.holds[pick_hold[j]]
                held_at = _data.T0 + timedelta(hours=float(hours[j]))
                row = dict(h, panel=serial, id=uuid.uuid4(), held_at=held_at)
                if draw[j] < 0.10:
                    row.update(state="open", disposition=None, disposition_note=None,
                               disposed_at=None, disposed_by=None)
                    status = "on_hold"
                    self.open_holds += 1
                else:
                    row.update(state="closed", disposition="release",
                               disposition_note="re-measured on the reference tool; within "
                               "limit", disposed_at=held_at + timedelta(hours=6),
                               disposed_by="bench supervisor")
                holds.append(row)
            panels.append({"serial": serial, "product_id": self.product_id,
                           "lot_id": lot_no, "status": status,
                           "created_at": _data.T0 + timedelta(minutes=1.5 * i)})
            states.append(st)
        with self.db.engine.begin() as conn:
            if lots:
                conn.execute(insert(Lot), lots)
            conn.execute(insert(Panel), panels)
            conn.execute(insert(PanelEstimate), states)
            if holds:
                conn.execute(insert(Hold), holds)
        self.panels += count


def measure_get(db: Database, client: Any, headers: dict[str, str], repeat: int,
                profile: bool) -> dict[str, Any]:
    statements = 0

    def count(*_: Any) -> None:
        nonlocal statements
        statements += 1

    for _ in range(2):  # warm-up
        r = client.get("/api/v1/holds", headers=headers)
        assert r.status_code == 200, r.text
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        r = client.get("/api/v1/holds", headers=headers)
        times.append(time.perf_counter() - t)
    event.listen(db.engine, "before_cursor_execute", count)
    try:
        r = client.get("/api/v1/holds", headers=headers)
    finally:
        event.remove(db.engine, "before_cursor_execute", count)
    from app.services import holds as hold_service

    service = []
    for _ in range(max(3, repeat // 2)):  # the service alone, no HTTP / JSON
        t = time.perf_counter()
        hold_service.list_holds(db=db)
        service.append(time.perf_counter() - t)
    text = ""
    if profile:  # in this thread: TestClient runs the app in a worker thread cProfile misses
        prof = cProfile.Profile()
        prof.enable()
        hold_service.list_holds(db=db)
        prof.disable()
        out = io.StringIO()
        pstats.Stats(prof, stream=out).sort_stats("cumulative").print_stats(15)
        text = out.getvalue()
    return {"best_ms": 1e3 * min(times), "median_ms": 1e3 * statistics.median(times),
            "service_ms": 1e3 * min(service),
            "items": len(r.json()["holds"]), "bytes": len(r.content), "statements": statements,
            "profile": text}


def hold_list(db: Database, states: list[dict[str, Any]], holds: list[dict[str, Any]],
              args: argparse.Namespace) -> dict[str, Any]:
    hs = HoldStore(db, states, holds, args.seed)
    engineer, _ = keys.create(db=db, role="engineer", label="bench engineer")
    headers = {"Authorization": f"Bearer {engineer}"}
    client = client_for(db)
    out: dict[str, Any] = {}
    for label, n, repeat in (("small", args.small, args.repeat),
                             ("large", args.large, max(3, args.repeat // 3))):
        fill_s = hs.grow_to(n)
        out[label] = {"panels": hs.panels, "open_holds": hs.open_holds, "fill_s": fill_s,
                      **measure_get(db, client, headers, repeat,
                                    args.profile and label == "large")}
    out["ratio"] = out["large"]["best_ms"] / out["small"]["best_ms"]
    return out


# ----------------------------------------------------------------------------- main

def run(backend: str, tmp: Path, args: argparse.Namespace) -> tuple[float, float]:
    print(f"\n== {backend}")
    with store(backend, tmp, "forecast") as db:
        f = forecast_share(db, tmp, args)
        states, holds = templates(db)
    print(f"  store 1: {args.history_panels} panels of history imported in {f['setup_s']:.1f} s; "
          f"{f['holds_in_store']} automatic holds after the posts")
    print(f"  POST /api/v1/measurements x {f['posts']} (49 sites, layers 1-5):"
          f" mean {f['post_mean_ms']:.1f} ms, median {f['post_median_ms']:.1f} ms")
    print(f"    measurements.accept  {f['accept_ms']:7.2f} ms a post")
    print(f"    panel_estimate.compute        {f['compute_ms']:7.2f} ms a post")
    print(f"    forecast_final       {f['forecast_ms']:7.2f} ms a post")
    print(f"  forecast share: {100 * f['share_post']:.1f} % of a POST, "
          f"{100 * f['share_accept']:.1f} % of accept "
          f"(history learned {f['learn_calls']}x during the posts, {f['learn_s']:.2f} s)")
    with store(backend, tmp, "holds") as db:
        h = hold_list(db, states, holds, args)
    for label in ("small", "large"):
        m = h[label]
        print(f"  GET /api/v1/holds, {m['panels']:>6,} panels, {m['open_holds']:>5,} open holds"
              f" (filled in {m['fill_s']:.1f} s): best {m['best_ms']:8.1f} ms, median "
              f"{m['median_ms']:8.1f} ms; {m['items']} holds on the page, "
              f"{m['bytes'] / 1024:.0f} KiB, {m['statements']} SQL statements; "
              f"holds.list_holds alone best {m['service_ms']:.1f} ms")
    print(f"  ratio {args.large:,} / {args.small:,} panels: {h['ratio']:.1f}"
          f" (target <= {TARGET_RATIO:g}: {'met' if h['ratio'] <= TARGET_RATIO else 'NOT met'})")
    if h["large"]["profile"]:
        print("  cProfile of holds.list_holds at the large store, top 15 by cumulative time:")
        print("\n".join("    " + ln for ln in h["large"]["profile"].splitlines() if ln.strip()))
    return f["share_post"], h["ratio"]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--history-panels", type=int, default=60)
    ap.add_argument("--posts", type=int, default=200)
    ap.add_argument("--small", type=int, default=300)
    ap.add_argument("--large", type=int, default=30_000)
    ap.add_argument("--repeat", type=int, default=15, help="GETs per size (best of); the large "
                    "store gets a third as many")
    ap.add_argument("--seed", type=int, default=2026)
    ap.add_argument("--skip-sqlite", action="store_true")
    ap.add_argument("--skip-postgres", action="store_true")
    ap.add_argument("--profile", action="store_true",
                    help="cProfile holds.list_holds at the large size")
    args = ap.parse_args()
    from app.config import get_settings

    print(f"stackledger holds benchmark: forecast_samples {get_settings().forecast_samples}, "
          f"seed {args.seed}, python {sys.version.split()[0]}; {_data.machine()}")
    summary = []
    with _data.tempdir() as tmp_name:
        tmp = Path(tmp_name)
        if not args.skip_sqlite:
            summary.append(("SQLite", *run("SQLite", tmp, args)))
        if not args.skip_postgres:
            why = _data.pg_available()
            if why:
                print(f"\n== PostgreSQL skipped: {why}")
            else:
                summary.append(("PostgreSQL", *run("PostgreSQL", tmp, args)))
    print(f"\n== summary ({_data.machine()})")
    for name, share, ratio in summary:
        verdict = "met" if ratio <= TARGET_RATIO else "NOT met"
        print(f"  {name:<11} forecast {100 * share:.1f} % of a POST; hold list ratio "
              f"{ratio:.1f} (target <= {TARGET_RATIO:g}: {verdict})")


if __name__ == "__main__":
    main()
