"""Concurrent POST /api/v1/measurements against `stackledger serve --workers N`, a bare baseline
of the same rows, and where the time of one POST goes.

Target (the issue): with 16 concurrent clients posting 49-site measurements, >= 150 accepted
measurements a second against PostgreSQL on this 2-core machine with p99 <= 250 ms; SQLite
reported too.

    .venv/bin/python benchmarks/posts.py                       # 2 workers, PostgreSQL + SQLite
    .venv/bin/python benchmarks/posts.py --workers 1,2,3       # each worker count in turn
    .venv/bin/python benchmarks/posts.py --skip-sqlite --posts 800 --profile-posts 100

For each database and worker count, on a fresh throwaway store (PostgreSQL database with a random
name, dropped WITH (FORCE); SQLite file in a temp dir):

1. Store: the product BENCH12, --history-panels completed panels (all 24 layers) and
   --panels work-in-progress panels whose first 0..7 layers (both sides, drawn per panel) are
   already in, all through app.services.imports.import_csv, so the product has a history
   (a panel counts in it once all its layers are in) and the panels are at mixed stages.
2. Server: `stackledger serve --workers N` in a subprocess on 127.0.0.1 (a free port), with
   STACKLEDGER_DATABASE_URL set; a tool key made with app.services.keys.create.
3. Load: --clients threads, each with its own httpx.Client (keep-alive, loopback only), each
   owning a share of the work-in-progress panels and posting their next --layers-each layers in
   order (layer k side A, side B, then layer k+1), round-robin over its panels, so that the server
   sees a mix of panels and layers and each panel's layers arrive in order. Bodies are encoded
   before the clock starts. One warm-up post per client first (on separate panels). The run
   stops after every post or after --seconds.
4. Baseline: the same site rows (10 columns, one row a site) inserted with no HTTP, by
   --clients threads, one transaction per measurement: psycopg executemany into one plain table
   (PostgreSQL), sqlite3 executemany under BEGIN IMMEDIATE into a WAL file (SQLite).
5. Where the time goes (once per database, in this process, no concurrency): --profile-posts
   posts through fastapi.testclient with measurements.accept wrapped (the rest of a POST is
   HTTP, auth, JSON parse and validation, and the answer's serialisation), then the same
   number of measurements.accept calls under cProfile, grouped by the pipeline's functions.

The clients run on the same 2 cores as the server and the database; their share of the CPU is
part of what is measured. Prints figures; asserts nothing.
"""

from __future__ import annotations

import argparse
import contextlib
import json
import os
import socket
import sqlite3
import subprocess
import sys
import threading
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx
import numpy as np
import psycopg

sys.path.insert(0, str(Path(__file__).resolve().parent))

import _data
from _post_profile import where_time_goes

from app.services import keys

TARGET_RATE = 150.0
TARGET_P99_MS = 250.0
ROOT = Path(__file__).resolve().parent.parent


# ----------------------------------------------------------------------------- workload

def workload(args: argparse.Namespace) -> dict[str, Any]:
    """History measurements, work-in-progress panels' first layers, and the posts to send."""
    rng = np.random.default_rng(args.seed)
    history = _data.serials(args.history_panels, "HP")
    wip = _data.serials(args.panels, "WP")
    warm = _data.serials(args.clients, "WU")
    done = {s: int(rng.integers(0, 8)) for s in wip}  # layers already in, both sides
    history_ms = list(_data.measurements(history, seed=args.seed, drift_share=0.15))
    wip_ms = list(_data.measurements(wip, seed=args.seed + 1, drift_share=0.1))
    before = [m for m in wip_ms if m["layer"] <= done[m["panel"]]]
    later = [m for m in wip_ms
             if done[m["panel"]] < m["layer"] <= done[m["panel"]] + args.layers_each]
    warm_ms = [m for m in _data.measurements(warm, seed=args.seed + 2) if m["layer"] == 1
               and m["side"] == "A"]
    # Each client owns every clients-th panel; within a client, panels take turns layer by
    # layer, so each panel's own layers stay in order.
    by_panel: dict[str, list[dict[str, Any]]] = {}
    for m in later:
        by_panel.setdefault(m["panel"], []).append(m)
    posts: list[list[bytes]] = []
    for c in range(args.clients):
        mine = [by_panel.get(s, []) for s in wip[c::args.clients]]
        order = [m for step in range(2 * args.layers_each) for ms in mine
                 if step < len(ms) for m in [ms[step]]]
        posts.append([json.dumps(_data.post_body(m)).encode() for m in order])
    return {
        "names": history + wip + warm,
        "history": history_ms + before,
        "posts": posts,
        "warm": [json.dumps(_data.post_body(m)).encode() for m in warm_ms],
        "rows": [
            [
                (
                    m["panel"],
                    m["layer"],
                    m["side"],
                    m["frame"],
                    m["exposure_tool"],
                    m["measured_at"],
                    float(x),
                    float(y),
                    float(dx),
                    float(dy),
                )
                for x, y, dx, dy in zip(m["x"], m["y"], m["dx"], m["dy"], strict=True)
            ]
            for m in later
        ],
    }


@contextlib.contextmanager
def store(backend: str, tmp: Path, name: str, work: dict[str, Any]) -> Iterator[tuple[str, str]]:
    """A fresh store with the product, panels and imported layers; yields (url, tool key)."""
    cm = _data.pg_url("stackledger_posts") if backend == "PostgreSQL" \
        else _data.sqlite_url(tmp, f"{name}.db")
    with cm as url:
        db = _data.migrated(url)
        try:
            _data.register(db, work["names"])
            path = tmp / f"{name}.csv"
            _data.write_measurements(path, work["history"])
            from app.services import imports

            with path.open("rb") as f:
                imports.import_csv(db=db, stream=f, name=path.name, principal_label="bench",
                                   owner=0)
            tool_key, _ = keys.create(db=db, role="uploader", label="bench tool")
        finally:
            db.close()
        yield url, tool_key


# ----------------------------------------------------------------------------- server + load

def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


@contextlib.contextmanager
def server(url: str, workers: int, log: Path) -> Iterator[str]:
    """`stackledger serve --workers N` on a free loopback port, stopped (SIGTERM) at the end."""
    port = free_port()
    env = dict(os.environ, STACKLEDGER_DATABASE_URL=url)
    with log.open("w") as out:
        proc = subprocess.Popen(
            [str(ROOT / ".venv/bin/stackledger"), "serve", "--workers", str(workers),
             "--port", str(port)], env=env, stdout=out, stderr=subprocess.STDOUT, cwd=ROOT)
    base = f"http://127.0.0.1:{port}"
    try:
        deadline = time.monotonic() + 60
        while True:
            try:
                if httpx.get(f"{base}/api/v1/health", timeout=2).status_code == 200:
                    break
            except httpx.HTTPError:
                pass
            if proc.poll() is not None or time.monotonic() > deadline:
                raise SystemExit(f"server did not start; see {log}:\n{log.read_text()[-2000:]}")
            time.sleep(0.2)
        yield base
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()


def load(base: str, key: str, work: dict[str, Any], seconds: float) -> dict[str, Any]:
    """Every client's posts, concurrently; latencies of the accepted ones, errors by status."""
    headers = {"Authorization": f"Bearer {key}", "Content-Type": "application/json"}
    clients = len(work["posts"])
    latencies: list[list[float]] = [[] for _ in range(clients)]
    errors: list[list[str]] = [[] for _ in range(clients)]
    start = threading.Barrier(clients + 1)
    stop_at = [float("inf")]  # set to the bound as the clock starts

    def client(i: int) -> None:
        with httpx.Client(base_url=base, headers=headers, timeout=60) as http:
            r = http.post("/api/v1/measurements", content=work["warm"][i])
            if r.status_code != 201:
                errors[i].append(f"warm-up {r.status_code}: {r.text[:200]}")
            start.wait()
            for body in work["posts"][i]:
                if time.perf_counter() > stop_at[0]:
                    break
                t = time.perf_counter()
                try:
                    r = http.post("/api/v1/measurements", content=body)
                except httpx.HTTPError as exc:
                    errors[i].append(f"{type(exc).__name__}: {exc}")
                    continue
                if r.status_code == 201:
                    latencies[i].append(time.perf_counter() - t)
                else:
                    errors[i].append(f"{r.status_code}: {r.text[:200]}")

    threads = [threading.Thread(target=client, args=(i,)) for i in range(clients)]
    stop_at[0] = time.perf_counter() + 60 + seconds  # warm-ups: a minute at most
    for t in threads:
        t.start()
    start.wait()
    t0 = time.perf_counter()
    stop_at[0] = t0 + seconds
    for t in threads:
        t.join()
    wall = time.perf_counter() - t0
    done = sorted(x for per in latencies for x in per)
    errs = [e for per in errors for e in per]
    return {"accepted": len(done), "wall_s": wall, "rate": len(done) / wall,
            "p50_ms": 1e3 * float(np.percentile(done, 50)) if done else float("nan"),
            "p95_ms": 1e3 * float(np.percentile(done, 95)) if done else float("nan"),
            "p99_ms": 1e3 * float(np.percentile(done, 99)) if done else float("nan"),
            "errors": len(errs), "first_errors": errs[:3],
            "planned": sum(len(p) for p in work["posts"])}


# ----------------------------------------------------------------------------- baseline

def baseline(backend: str, tmp: Path, rows: list[list[tuple[Any, ...]]], clients: int
             ) -> dict[str, Any]:
    """The same rows, one transaction per measurement, ``clients`` threads, no HTTP."""
    columns = ("panel text, layer integer, side text, frame text, tool text, "
               "measured_at {ts}, x_mm float8, y_mm float8, dx_um float8, dy_um float8")
    latencies: list[float] = []
    lock = threading.Lock()
    cm: Any = _data.pg_url("stackledger_posts_base") if backend == "PostgreSQL" \
        else contextlib.nullcontext(str(tmp / "baseline.db"))
    with cm as url:
        if backend == "PostgreSQL":
            conninfo = url.replace("postgresql+psycopg://", "postgresql://")

            def connect() -> Any:
                return psycopg.connect(conninfo)

            insert = "INSERT INTO rows VALUES (%s, %s, %s, %s, %s, %s, %s, %s, %s, %s)"
            with connect() as conn:
                conn.execute(f"CREATE TABLE rows ({columns.format(ts='timestamptz')})")
        else:
            def connect() -> Any:
                conn = sqlite3.connect(url, isolation_level=None, timeout=30,
                                       check_same_thread=False)
                conn.execute("PRAGMA journal_mode=WAL")
                conn.execute("PRAGMA synchronous=NORMAL")  # as app/db.py sets it
                return conn

            insert = "INSERT INTO rows VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)"
            conn = connect()
            conn.execute(f"CREATE TABLE rows ({columns.format(ts='text')})")
            conn.close()
            rows = [[(*r[:5], r[5].isoformat(), *r[6:]) for r in m] for m in rows]

        def client(i: int) -> None:
            conn = connect()
            mine: list[float] = []
            try:
                for m in rows[i::clients]:
                    t = time.perf_counter()
                    if backend == "PostgreSQL":
                        with conn.transaction(), conn.cursor() as cur:
                            cur.executemany(insert, m)
                    else:
                        conn.execute("BEGIN IMMEDIATE")
                        conn.executemany(insert, m)
                        conn.execute("COMMIT")
                    mine.append(time.perf_counter() - t)
            finally:
                conn.close()
            with lock:
                latencies.extend(mine)

        threads = [threading.Thread(target=client, args=(i,)) for i in range(clients)]
        t0 = time.perf_counter()
        for t in threads:
            t.start()
        for t in threads:
            t.join()
        wall = time.perf_counter() - t0
    latencies.sort()
    return {"measurements": len(latencies), "wall_s": wall, "rate": len(latencies) / wall,
            "p50_ms": 1e3 * float(np.percentile(latencies, 50)),
            "p99_ms": 1e3 * float(np.percentile(latencies, 99))}


# ----------------------------------------------------------------------------- main

def run(backend: str, tmp: Path, work: dict[str, Any], args: argparse.Namespace,
        worker_counts: list[int]) -> list[tuple[str, int, dict[str, Any], float]]:
    print(f"\n== {backend}")
    out = []
    for n in worker_counts:
        t = time.perf_counter()
        with store(backend, tmp, f"posts_w{n}", work) as (url, key):
            setup_s = time.perf_counter() - t
            with server(url, n, tmp / f"serve_{backend}_{n}.log") as base:
                r = load(base, key, work, args.seconds)
        print(f"  --workers {n}: store set up in {setup_s:.0f} s (not timed)")
        print(f"    {r['accepted']:,} of {r['planned']:,} posts accepted in {r['wall_s']:.1f} s: "
              f"{r['rate']:.1f} measurements/s; latency p50 {r['p50_ms']:.0f} ms, "
              f"p95 {r['p95_ms']:.0f} ms, p99 {r['p99_ms']:.0f} ms; errors {r['errors']}")
        for e in r["first_errors"]:
            print(f"      error: {e}")
        out.append((backend, n, r, 0.0))
    base_r = baseline(backend, tmp, work["rows"], args.clients)
    print(f"  baseline (no HTTP, {args.clients} threads, one transaction a measurement): "
          f"{base_r['measurements']:,} in {base_r['wall_s']:.2f} s: {base_r['rate']:.0f} "
          f"measurements/s; p50 {base_r['p50_ms']:.1f} ms, p99 {base_r['p99_ms']:.1f} ms")
    for i, (_, n, r, _) in enumerate(out):
        ratio = r["rate"] / base_r["rate"]
        out[i] = (backend, n, r, ratio)
        print(f"  ratio POSTs / baseline, --workers {n}: {ratio:.3f}")
    if args.profile_posts:
        with store(backend, tmp, "posts_profile", work) as (url, key):
            w = where_time_goes(url, key, work, args.profile_posts, args.profile_top)
        print(f"  where one POST goes ({w['posts']} sequential POSTs through TestClient, "
              "no concurrency):")
        print(f"    POST mean {w['post_ms']:.1f} ms = measurements.accept {w['accept_ms']:.1f} ms"
              f" + HTTP, auth, routing, JSON parse/validation, answer serialisation "
              f"{w['post_ms'] - w['accept_ms']:.1f} ms")
        print(f"    (JSON parse + validation alone, MeasurementCreate.model_validate_json: "
              f"{w['parse_ms']:.2f} ms)")
        print(f"    SQL statements through SQLAlchemy: {w['statements_post']:.1f} a POST, of "
              f"which accept {w['statements_accept']:.1f} (plus 3 bulk inserts on the driver)")
        print(f"    accept under cProfile ({w['profiled']} calls; times inflated): "
              f"{w['profiled_accept_ms']:.1f} ms a call")
        for label, ms in sorted(w["groups"].items(), key=lambda kv: -kv[1]):
            print(f"      {label:<54}{ms:7.2f} ms {100 * ms / w['profiled_accept_ms']:5.1f} %")
        if w["listing"]:
            print(f"    cProfile of accept, top {args.profile_top} functions of app/ by "
                  "cumulative time (all calls):")
            lines = w["listing"].splitlines()
            start = next((i for i, ln in enumerate(lines) if "ncalls" in ln), 0)
            print("\n".join("      " + ln for ln in lines[start:] if ln.strip()))
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--workers", default="2",
                    help="server processes; a comma list runs each in turn (e.g. 1,2,3)")
    ap.add_argument("--clients", type=int, default=16)
    ap.add_argument("--panels", type=int, default=200, help="work-in-progress panels posted to")
    ap.add_argument("--layers-each", type=int, default=4,
                    help="layers posted per panel (both sides): posts = panels x 2 x this")
    ap.add_argument("--history-panels", type=int, default=30,
                    help="completed panels imported first (history is used from 20 panels)")
    ap.add_argument("--seconds", type=float, default=120.0, help="bound on one load run")
    ap.add_argument("--profile-posts", type=int, default=300,
                    help="posts for the where-the-time-goes split (0: skip)")
    ap.add_argument("--profile-top", type=int, default=0,
                    help="also list the top N app/ functions of the profile by cumulative time")
    ap.add_argument("--seed", type=int, default=2026)
    ap.add_argument("--skip-sqlite", action="store_true")
    ap.add_argument("--skip-postgres", action="store_true")
    args = ap.parse_args()
    worker_counts = [int(w) for w in args.workers.split(",")]
    from app.config import get_settings

    work = workload(args)
    print(f"stackledger posts benchmark: {args.clients} clients, "
          f"{sum(map(len, work['posts'])):,} posts of 49 sites "
          f"over {args.panels} panels (layers in order), history of "
          f"{args.history_panels} completed panels, forecast_samples "
          f"{get_settings().forecast_samples}, seed {args.seed}, python "
          f"{sys.version.split()[0]}; {_data.machine()}")
    summary = []
    with _data.tempdir() as tmp_name:
        tmp = Path(tmp_name)
        if not args.skip_postgres:
            why = _data.pg_available()
            if why:
                print(f"\n== PostgreSQL skipped: {why}")
            else:
                summary += run("PostgreSQL", tmp, work, args, worker_counts)
        if not args.skip_sqlite:
            summary += run("SQLite", tmp, work, args, worker_counts)
    print(f"\n== summary ({_data.machine()})")
    for backend, n, r, ratio in summary:
        met = r["rate"] >= TARGET_RATE and r["p99_ms"] <= TARGET_P99_MS and not r["errors"]
        print(f"  {backend:<11} --workers {n}: {r['rate']:6.1f} measurements/s, p99 "
              f"{r['p99_ms']:6.0f} ms, {r['errors']} errors, ratio to baseline {ratio:.3f}"
              f"{'' if backend == 'SQLite' else ' (target >= 150/s, p99 <= 250 ms: '}"
              f"{'' if backend == 'SQLite' else ('met)' if met else 'NOT met)')}")


if __name__ == "__main__":
    main()
