"""Crash: a CLI import killed with SIGKILL at seeded moments, 5 times per database. Each import
is all or nothing (the store holds either none or every one of the file's measurements and
sites), SQLite's ``PRAGMA integrity_check`` says ok, and the next write succeeds.

The moments are drawn from one seed as fractions of a complete import of the same file timed in
the same run, so they fall from start-up through reading, fitting and writing. Nothing about
wall-clock time is asserted.
"""

from __future__ import annotations

import signal
import subprocess
import sys
import time
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
from sqlalchemy import func, select, text

from app.services import imports
from app.store.tables import Measurement, Site
from tests.factories import grid, make_panel, make_product
from tests.robustness.live import ROOT, store_url

HEADER = "panel,layer,side,frame,tool,measured_at,x_mm,y_mm,dx_um,dy_um\n"
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
                lines += [f"K{p:03d},{layer},{side},tool,EXP-T1,{at},{x},{y},{a:.4f},{b:.4f}"
                          for (x, y), (a, b) in zip(pts, d, strict=True)]
                n += 1
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return n, len(lines) - 1


def _import(path: Path, url: str) -> subprocess.Popen[bytes]:
    return subprocess.Popen(
        [sys.executable, "-c", "from app.cli import main; main()", "import", str(path),
         "--database", url], cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)


def _counts(db) -> tuple[int, int]:  # type: ignore[no-untyped-def]
    with db.reading() as session:
        return (int(session.scalar(select(func.count()).select_from(Measurement)) or 0),
                int(session.scalar(select(func.count()).select_from(Site)) or 0))


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
    outcomes = []
    for fraction in rng.uniform(0.3, 0.95, KILLS):
        before = _counts(db)
        proc = _import(path, url)
        time.sleep(fraction * full)
        proc.send_signal(signal.SIGKILL)
        proc.wait(timeout=60)
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
            f"{serial},1,A,tool,EXP-T1,2026-11-03T06:00:00Z,{x},{y},1,1\n"
            for x in (-200, 0, 200) for y in (-200, 0, 200)), encoding="utf-8")
        imports.import_path(db=db, path=small, label="crash test")
        assert _counts(db)[0] == after[0] + 1
    assert len(outcomes) == KILLS
    print(f"kills at seeded moments: {outcomes}")  # shown with -s; each was all or nothing
