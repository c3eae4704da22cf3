"""Crash: a CLI import killed with SIGKILL at seeded moments, 5 times per database. Each import
is all or nothing (the store holds either none or every one of the file's measurements and
sites), SQLite's ``PRAGMA integrity_check`` says ok, and the next write succeeds.

Each kill waits until the import holds an open write transaction (SQLite: its write lock is
taken; PostgreSQL: its backend has a transaction id), then a seeded moment more, drawn as a
fraction of a complete import of the same file timed in the same run; so most kills land in the
middle of the write, and the test counts how many did. Nothing about wall-clock time is
asserted.
"""

from __future__ import annotations

import signal
import sqlite3
import subprocess
import sys
import time
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
from sqlalchemy import func, select, text

from app.services import imports
from app.store.tables import Measurement, SiteSet
from tests.factories import grid, make_panel, make_product
from tests.robustness.live import ROOT, store_url

HEADER = "panel,layer,side,frame,exposure_tool,measured_at,x_mm,y_mm,dx_um,dy_um\n"
PANELS = 30
LAYERS = 3
KILLS = 5
SEED = 8


def _write_csv(path: Path, rng: np.random.Generator) -> tuple[int, int]:
    """A file of PANELS x LAYERS x 2 sides measurements of 25 sites; returns (measurements,
    rows)."""
    t0 = datetime(2026, 11, 2, 6, 0, tzinfo=UTC)
    lines = [HEADER.strip()]
    pts = grid(5)
    n = 0
    for p in range(PANELS):
        for layer in range(1, LAYERS + 1):
            for side in ("A", "B"):
                at = (t0 + timedelta(minutes=n)).isoformat()
                d = rng.normal(0, 3, (len(pts), 2))
                lines += [f"K{p:03d},{layer},{side},facing_side,EXP-T1,{at},{x},{y},{a:.4f},{b:.4f}"
                          for (x, y), (a, b) in zip(pts, d, strict=True)]
                n += 1
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return n, len(lines) - 1


def _import(path: Path, url: str) -> subprocess.Popen[bytes]:
    return subprocess.Popen(
        [sys.executable, "-c", "from app.cli import main; main()", "import", str(path),
         "--database", url], cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)


def _writing(db) -> bool:  # type: ignore[no-untyped-def]
    """Whether another connection holds an open write transaction on the store."""
    if db.engine.dialect.name == "sqlite":
        conn = sqlite3.connect(db.engine.url.database, timeout=0, isolation_level=None)
        try:
            conn.execute("BEGIN IMMEDIATE")
            conn.execute("ROLLBACK")
            return False
        except sqlite3.OperationalError:  # "database is locked": a writer holds the lock
            return True
        finally:
            conn.close()
    with db.engine.connect() as conn:
        return bool(conn.execute(text(
            "SELECT count(*) FROM pg_stat_activity WHERE datname = current_database() "
            "AND backend_xid IS NOT NULL AND pid <> pg_backend_pid()")).scalar())


def _counts(db) -> tuple[int, int]:  # type: ignore[no-untyped-def]
    with db.reading() as session:
        return (int(session.scalar(select(func.count()).select_from(Measurement)) or 0),
                int(session.scalar(select(func.sum(SiteSet.n_sites))) or 0))


def test_killed_imports_leave_all_or_nothing(db, tmp_path):
    make_product(db)
    for p in range(PANELS):
        make_panel(db, f"K{p:03d}")
    rng = np.random.default_rng(SEED)
    path = tmp_path / "batch.csv"
    n_measurements, n_rows = _write_csv(path, rng)
    url = store_url(db)
    started = time.monotonic()
    assert _import(path, url).wait(timeout=600) == 0
    full = time.monotonic() - started
    assert _counts(db) == (n_measurements, n_rows)
    outcomes, mid_write = [], 0
    # The pipeline checks, fits and forecasts before its write transaction, which is a small
    # share of the import: the seeded delays after the write is seen are a small share too.
    for i, fraction in enumerate(rng.uniform(0.0, 0.01, KILLS)):
        before = _counts(db)
        # New content each time: a file already imported is answered as a repeat, unwritten.
        path = tmp_path / f"batch{i}.csv"
        _write_csv(path, rng)
        proc = _import(path, url)
        while proc.poll() is None and not _writing(db):
            time.sleep(0.005)
        time.sleep(fraction * full)
        mid_write += proc.poll() is None and _writing(db)
        proc.send_signal(signal.SIGKILL)
        # Killed, or done before the signal came: never an import that failed on its own.
        assert proc.wait(timeout=60) in (-signal.SIGKILL, 0)
        after = _counts(db)
        added = (after[0] - before[0], after[1] - before[1])
        assert added in ((0, 0), (n_measurements, n_rows)), added  # all or nothing
        outcomes.append("all" if added[0] else "nothing")
        if db.engine.dialect.name == "sqlite":
            with db.engine.connect() as conn:
                assert conn.execute(text("PRAGMA integrity_check")).scalar() == "ok"
        # The next write succeeds: a new panel and a measurement of it, through the import.
        serial = make_panel(db, f"NEXT{len(outcomes)}")
        small = tmp_path / f"next{len(outcomes)}.csv"
        small.write_text(HEADER + "".join(
            f"{serial},1,A,facing_side,EXP-T1,2026-11-03T06:00:00Z,{x},{y},1,1\n"
            for x in (-200, 0, 200) for y in (-200, 0, 200)), encoding="utf-8")
        imports.import_path(db=db, path=small, label="crash test")
        assert _counts(db)[0] == after[0] + 1
    assert len(outcomes) == KILLS
    assert mid_write >= 1, "at least one kill must land in an open write transaction"
    # Shown with -s: each was all or nothing.
    print(f"{db.engine.dialect.name}: {mid_write} of {KILLS} kills in an open write "
          f"transaction; outcomes {outcomes}")
