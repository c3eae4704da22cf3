"""CSV import throughput: app.services.imports.import_csv end to end against a bare insert.

Target (the issue): 1,000,000 site rows into SQLite end to end (read the CSV into the batch
form, checks, fit, estimates, write measurements, packed sites, fits and panel states) at
>= 0.33 of a bare sqlite3 executemany of the same rows into one table with 49 sites a
measurement, >= 0.20 with 9, peak memory under 500 MB; the same against PostgreSQL, measured
against a bare psycopg COPY of the same rows.

    .venv/bin/python benchmarks/ingest.py                 # 1,000,776 rows, 49 sites, both DBs
    .venv/bin/python benchmarks/ingest.py --sites 9       # 1,000,080 rows, 9 sites, both DBs
    .venv/bin/python benchmarks/ingest.py --rows 200000 --skip-postgres --profile

Each database is a throwaway one (SQLite file in a temp dir; PostgreSQL CREATE DATABASE with a
random name, dropped WITH (FORCE) at the end), migrated with app.store.migrate.upgrade. The
import runs in a child process (multiprocessing, spawn) so that its peak RSS is the import's
alone. Baselines time only the insert (+ commit) of rows pre-parsed with the csv module into
typed tuples, best of --baseline-runs; a best-of baseline makes the ratio conservative.
Prints figures; asserts nothing.
"""

from __future__ import annotations

import argparse
import cProfile
import csv
import io
import math
import multiprocessing as mp
import pstats
import sqlite3
import sys
import time
from pathlib import Path
from typing import Any

import psycopg

sys.path.insert(0, str(Path(__file__).resolve().parent))

import _data
from _data import Timer, fmt_rate

#: The issue's targets: end to end / bare insert, by sites a measurement.
TARGET_RATIO = {49: 0.33, 9: 0.20}
TARGET_MB = 500.0
STAGES = (
    "read: imports.read (CSV -> batch form)",
    "  of which pandas.read_csv chunks",
    "  of which _read_chunk (keys, numbers)",
    "prepare: intake.prepare (read transaction)",
    "  of which checks.problems",
    "  of which panel_estimate.current_layers_many",
    "  of which history.learn",
    "  of which mirror side B (_to_panel_frame)",
    "  of which fit (_fit -> fit_many)",
    "  of which estimates (_estimate)",
    "    of which panel_estimate.compute",
    "      of which forecast_final",
    "write: intake.write (write transaction)",
    "  of which lock panels (_lock)",
    "  of which bulk.insert measurements",
    "  of which sitepack.pack_many",
    "  of which bulk.insert measurement_sites",
    "  of which bulk.insert fits",
    "  of which bulk.supersede",
    "  of which store estimates (_store_estimates)",
    "    of which panel_estimate.store",
    "    of which holds.apply_automatic",
    "  of which flush + commit",
)


# ----------------------------------------------------------------------------- end to end

def _rss_after(owner: Any, name: str, marks: dict[str, float]) -> None:
    """Note the process's resident set when ``owner.name`` returns (where memory builds up)."""
    original = getattr(owner, name)

    def noted(*args: Any, **kwargs: Any) -> Any:
        result = original(*args, **kwargs)
        marks[name] = _data.rss_mb()
        return result

    setattr(owner, name, noted)


def _instrument(timer: Timer, marks: dict[str, float]) -> None:
    """Light wrappers (a few thousand calls a run at most) that split the import by stage.

    Every wrapped name is looked up as a module attribute at call time by the pipeline
    (``imports.read``, ``intake.prepare``, ``checks.problems`` ...), so wrapping the attribute
    times every call. ``Timer.wrap`` skips a name the app no longer has."""
    from sqlalchemy import event
    from sqlalchemy.orm import Session

    from app.services import checks, history, holds, imports, intake, panel_estimate
    from app.store import bulk, sitepack

    original_chunks = imports._chunks

    def chunks(*args: Any, **kwargs: Any) -> Any:
        it = original_chunks(*args, **kwargs)
        while True:
            t = time.perf_counter()
            try:
                chunk = next(it)
            except StopIteration:
                timer.add("  of which pandas.read_csv chunks", time.perf_counter() - t)
                return
            timer.add("  of which pandas.read_csv chunks", time.perf_counter() - t)
            yield chunk

    imports._chunks = chunks
    for owner, name in ((imports, "read"), (intake, "prepare"), (intake, "write")):
        _rss_after(owner, name, marks)
    timer.wrap(imports, "read", "read: imports.read (CSV -> batch form)")
    timer.wrap(imports, "_read_chunk", "  of which _read_chunk (keys, numbers)")
    timer.wrap(intake, "prepare", "prepare: intake.prepare (read transaction)")
    timer.wrap(checks, "problems", "  of which checks.problems")
    timer.wrap(panel_estimate, "current_layers_many",
               "  of which panel_estimate.current_layers_many")
    timer.wrap(history, "learn", "  of which history.learn")
    timer.wrap(intake, "_to_panel_frame", "  of which mirror side B (_to_panel_frame)")
    timer.wrap(intake, "_fit", "  of which fit (_fit -> fit_many)")
    timer.wrap(intake, "_estimate", "  of which estimates (_estimate)")
    timer.wrap(panel_estimate, "compute", "    of which panel_estimate.compute")
    timer.wrap(panel_estimate, "forecast_final", "      of which forecast_final")
    timer.wrap(intake, "write", "write: intake.write (write transaction)")
    timer.wrap(intake, "_lock", "  of which lock panels (_lock)")
    timer.wrap(sitepack, "pack_many", "  of which sitepack.pack_many")
    timer.wrap(bulk, "supersede", "  of which bulk.supersede")
    timer.wrap(intake, "_store_estimates", "  of which store estimates (_store_estimates)")
    timer.wrap(panel_estimate, "store", "    of which panel_estimate.store")
    timer.wrap(holds, "apply_automatic", "    of which holds.apply_automatic")
    timer.wrap(bulk, "insert", label_of=lambda session, table, *_, **__:
               f"  of which bulk.insert {table.name}")
    # The commit of the write transaction: from the session's before_commit (the final flush
    # follows it) to after_commit, counted only inside intake.write.
    began: dict[int, float] = {}

    def before(session: Any) -> None:
        if "write: intake.write (write transaction)" in timer.active:
            began[id(session)] = time.perf_counter()

    def after(session: Any) -> None:
        t = began.pop(id(session), None)
        if t is not None:
            timer.add("  of which flush + commit", time.perf_counter() - t)

    event.listen(Session, "before_commit", before)
    event.listen(Session, "after_commit", after)


def import_child(url: str, path: str, profile: bool, queue: Any) -> None:
    """Runs in a spawned process: one import_csv, its time, breakdown and peak RSS."""
    from app.db import Database
    from app.services import imports

    timer, marks = Timer(), {}
    if not profile:  # the profiled run goes unwrapped, so that the profile shows the app only
        _instrument(timer, marks)
    db = Database(url)
    rss_before = _data.peak_rss_mb()
    profiler = cProfile.Profile() if profile else None
    with open(path, "rb") as stream:
        cpu0 = time.process_time()
        t0 = time.perf_counter()
        if profiler:
            profiler.enable()
        _, result = imports.import_csv(db=db, stream=stream, name=Path(path).name,
                                       principal_label="bench", owner=0)
        if profiler:
            profiler.disable()
        t1 = time.perf_counter()
        cpu = time.process_time() - cpu0
    out = io.StringIO()
    if profiler:
        pstats.Stats(profiler, stream=out).sort_stats("cumulative").print_stats(25)
    db.close()
    queue.put({
        "seconds": t1 - t0, "cpu_s": cpu, "rows": result.rows, "measurements": result.measurements,
        "panels": result.panels, "rss_before_mb": rss_before, "rss_peak_mb": _data.peak_rss_mb(),
        "breakdown": [(k, timer.seconds[k], timer.calls[k]) for k in timer.seconds],
        "profile": out.getvalue(), "rss_after": marks,
    })


def end_to_end(url: str, path: Path, profile: bool) -> dict[str, Any]:
    ctx = mp.get_context("spawn")
    queue = ctx.Queue()
    proc = ctx.Process(target=import_child, args=(url, str(path), profile, queue))
    proc.start()
    while True:
        try:
            result: dict[str, Any] = queue.get(timeout=5)
            break
        except Exception:  # queue.Empty: still working, unless it died
            if not proc.is_alive():
                raise SystemExit(f"import child failed with exit code {proc.exitcode}") from None
    proc.join()
    return result


def repeated(make_url: Any, names: list[str], path: Path, runs: int, profile: bool
             ) -> tuple[dict[str, Any], list[float], float]:
    """``runs`` timed imports, each into a fresh store from ``make_url()`` (a context manager
    giving a URL), then one profiled import if asked. Returns the fastest run (its breakdown,
    the profile text of the profiled run), all run times and the registration time."""
    results, setup = [], 0.0
    for i in range(runs + (1 if profile else 0)):
        with make_url(i) as url:
            db = _data.migrated(url)
            t = time.perf_counter()
            _data.register(db, names)
            setup = time.perf_counter() - t
            db.close()
            results.append(end_to_end(url, path, profile=i == runs))
    timed = results[:runs]
    best = dict(min(timed, key=lambda r: r["seconds"]))
    best["rss_peak_mb"] = max(r["rss_peak_mb"] for r in results)
    best["profile"] = results[-1]["profile"] if profile else ""
    return best, [r["seconds"] for r in timed], setup


# ----------------------------------------------------------------------------- baselines

def parse_rows(path: Path) -> tuple[list[tuple[Any, ...]], float]:
    """The CSV as typed tuples (csv module), and the time it took."""
    t = time.perf_counter()
    with path.open(newline="", encoding="utf-8") as f:
        reader = csv.reader(f)
        next(reader)
        rows = [(p, int(k), s, fr, tl, at, float(x), float(y), float(dx), float(dy))
                for p, k, s, fr, tl, at, x, y, dx, dy in reader]
    return rows, time.perf_counter() - t


def sqlite_baseline(tmp: Path, rows: list[tuple[Any, ...]], runs: int
                    ) -> tuple[list[float], list[float]]:
    """Wall and CPU times of executemany + commit into one plain table of a fresh WAL file."""
    times, cpu = [], []
    for i in range(runs):
        conn = sqlite3.connect(tmp / f"baseline{i}.db", isolation_level=None)
        conn.execute("PRAGMA journal_mode=WAL")
        conn.execute("PRAGMA synchronous=NORMAL")
        conn.execute("CREATE TABLE rows (panel TEXT, layer INTEGER, side TEXT, frame TEXT, "
                     "tool TEXT, measured_at TEXT, x_mm REAL, y_mm REAL, dx_um REAL, "
                     "dy_um REAL)")
        t, c = time.perf_counter(), time.process_time()
        conn.execute("BEGIN IMMEDIATE")
        conn.executemany("INSERT INTO rows VALUES (?, ?, ?, ?, ?, ?, ?, ?, ?, ?)", rows)
        conn.execute("COMMIT")
        times.append(time.perf_counter() - t)
        cpu.append(time.process_time() - c)
        conn.close()
        for suffix in ("", "-wal", "-shm"):
            (tmp / f"baseline{i}.db{suffix}").unlink(missing_ok=True)
    return times, cpu


def pg_baseline(url: str, rows: list[tuple[Any, ...]], runs: int) -> list[float]:
    """Times of a psycopg COPY (write_row) + commit into one plain table."""
    conninfo = url.replace("postgresql+psycopg://", "postgresql://")
    times = []
    with psycopg.connect(conninfo) as conn:
        for i in range(runs):
            table = f"baseline_rows_{i}"
            conn.execute(f"CREATE TABLE {table} (panel text, layer integer, side text, "
                         "frame text, tool text, measured_at timestamptz, x_mm float8, "
                         "y_mm float8, dx_um float8, dy_um float8)")
            conn.commit()
            t = time.perf_counter()
            with conn.cursor() as cur, cur.copy(f"COPY {table} FROM STDIN") as copy:
                for row in rows:
                    copy.write_row(row)
            conn.commit()
            times.append(time.perf_counter() - t)
            conn.execute(f"DROP TABLE {table}")
            conn.commit()
    return times


# ----------------------------------------------------------------------------- report

def report(label: str, base_label: str, e2e: dict[str, Any], all_s: list[float],
           base_s: list[float], n_rows: int, setup_s: float, target: float,
           base_cpu: list[float] | None = None) -> tuple[float, float]:
    rate = e2e["rows"] / e2e["seconds"]
    base_rate = n_rows / min(base_s)
    ratio = rate / base_rate
    runs = ", ".join(f"{t:.1f}" for t in all_s)
    print(f"\n== {label}")
    print(f"  register {e2e['panels']} panels via services  {setup_s:8.1f} s"
          "  (per store; not timed)")
    print(f"  end to end import_csv       {e2e['seconds']:8.2f} s   "
          f"{fmt_rate(e2e['rows'], e2e['seconds'])}   best of {len(all_s)} ({runs} s); "
          f"import process CPU {e2e['cpu_s']:.1f} s")
    print(f"    ({e2e['rows']:,} rows, {e2e['measurements']:,} measurements, {e2e['panels']} panel"
          " states refreshed)")
    print(f"  baseline {base_label:<19}{min(base_s):8.2f} s   {fmt_rate(n_rows, min(base_s))}"
          f"   best of {len(base_s)} ({', '.join(f'{t:.2f}' for t in base_s)} s)")
    print(f"  ratio end to end / baseline {ratio:8.3f}     (target >= {target})")
    if base_cpu:
        # SQLite works inside the process, so CPU seconds cover all the work on both sides and
        # depend far less on other jobs' load than wall time does.
        print(f"  CPU-time ratio (baseline CPU {min(base_cpu):.2f} s / import CPU "
              f"{e2e['cpu_s']:.2f} s) {min(base_cpu) / e2e['cpu_s']:.3f}   (less load-bound)")
    print(f"  peak RSS of the import process {e2e['rss_peak_mb']:6.0f} MB "
          f"(target < {TARGET_MB:.0f}; {e2e['rss_before_mb']:.0f} MB before the import started)")
    if e2e.get("rss_after"):
        print("  resident set when each step returned: " + ", ".join(
            f"{name} {mb:.0f} MB" for name, mb in e2e["rss_after"].items()))
    print("  where the end-to-end time goes (light wrappers, same run):")
    found = {name: (seconds, calls) for name, seconds, calls in e2e["breakdown"]}
    order = [n for n in STAGES if n in found] + sorted(set(found) - set(STAGES))
    for name in order:
        seconds, calls = found[name]
        print(f"    {name:<50}{seconds:8.2f} s {100 * seconds / e2e['seconds']:5.1f} %"
              f"  {calls:>6} calls")
    rest = e2e["seconds"] - sum(s for n, (s, _) in found.items() if not n.startswith(" "))
    print(f"    {'rest (file read, digest, idempotency, answer)':<50}{rest:8.2f} s "
          f"{100 * rest / e2e['seconds']:5.1f} %")
    if e2e["profile"]:
        print("  cProfile, top 25 by cumulative time (profiled run; times inflated):")
        print("\n".join("    " + line for line in e2e["profile"].splitlines() if line.strip()))
    return ratio, e2e["rss_peak_mb"]


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--rows", type=int, default=1_000_000,
                    help="site rows wanted; rounded up to whole panels (24 measurements)")
    ap.add_argument("--sites", type=int, choices=(49, 9), default=49,
                    help="sites a measurement: a 7 x 7 or a 3 x 3 grid")
    ap.add_argument("--seed", type=int, default=2026)
    ap.add_argument("--runs", type=int, default=2,
                    help="end-to-end imports per database, each into a fresh store (best of)")
    ap.add_argument("--baseline-runs", type=int, default=3)
    ap.add_argument("--skip-sqlite", action="store_true")
    ap.add_argument("--skip-postgres", action="store_true")
    ap.add_argument("--profile", action="store_true",
                    help="one more import under cProfile (top 25 by cumtime), not timed")
    args = ap.parse_args()

    grid = _data.grid_for(args.sites)
    target = TARGET_RATIO[args.sites]
    n_panels = max(1, math.ceil(args.rows / _data.rows_per_panel(grid)))
    names = _data.serials(n_panels)
    print(f"stackledger ingest benchmark: {n_panels} panels x 24 measurements x {args.sites} "
          f"sites, seed {args.seed}, python {sys.version.split()[0]}, sqlite "
          f"{sqlite3.sqlite_version}, psycopg {psycopg.__version__}; {_data.machine()}")
    pg_why = None if args.skip_postgres else _data.pg_available()
    with _data.tempdir() as tmp_name:
        tmp = Path(tmp_name)
        path = tmp / "sites.csv"
        t = time.perf_counter()
        n_rows = _data.write_csv(path, names, seed=args.seed, grid=grid)
        print(f"CSV: {n_rows:,} rows, {path.stat().st_size / 1e6:.0f} MB, written in "
              f"{time.perf_counter() - t:.1f} s")
        results = {}
        if not args.skip_sqlite:
            def sqlite_store(i: int) -> Any:
                return _data.sqlite_url(tmp, f"store{i}.db")

            results["SQLite"] = repeated(sqlite_store, names, path, args.runs, args.profile)
        if not args.skip_postgres and not pg_why:
            results["PostgreSQL"] = repeated(lambda i: _data.pg_url(), names, path, args.runs,
                                             args.profile)
        # The baselines' pre-parsed rows are only built now, so that the parent is small while
        # the import children run.
        rows, parse_s = parse_rows(path)
        print(f"csv-module parse into typed tuples (not part of the baselines): {parse_s:.2f} s")
        summary = []
        if "SQLite" in results:
            e2e, all_s, setup_s = results["SQLite"]
            base, base_cpu = sqlite_baseline(tmp, rows, args.baseline_runs)
            summary.append(("SQLite", *report("SQLite", "sqlite3 executemany", e2e, all_s, base,
                                              n_rows, setup_s, target, base_cpu)))
        if "PostgreSQL" in results:
            e2e, all_s, setup_s = results["PostgreSQL"]
            with _data.pg_url() as url:
                base = pg_baseline(url, rows, args.baseline_runs)
            summary.append(("PostgreSQL", *report("PostgreSQL", "psycopg COPY", e2e, all_s,
                                                  base, n_rows, setup_s, target)))
        elif pg_why:
            print(f"\n== PostgreSQL skipped: {pg_why}")

    print(f"\n== summary ({args.sites} sites a measurement; {_data.machine()})")
    for name, ratio, mb in summary:
        print(f"  {name:<11} ratio {ratio:.3f} (target >= {target}: "
              f"{'met' if ratio >= target else 'NOT met'})   peak {mb:.0f} MB "
              f"(target < {TARGET_MB:.0f}: {'met' if mb < TARGET_MB else 'NOT met'})")


if __name__ == "__main__":
    main()
