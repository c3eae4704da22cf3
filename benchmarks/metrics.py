"""The cost of one /metrics scrape with a small and a large store.

Target (issue 8, point 6): a scrape must not count every measurement row, so its cost stays flat
as the store grows (a year of data). Measured: ``app.services.metrics.exposition`` (what the
route serves), best of --repeat, with --small and then --large measurement rows in the store; and
beside it, for comparison, the full-table ``count(*)`` a scrape used to run. Prints the ratio
large/small of each; asserts nothing.

    .venv/bin/python benchmarks/metrics.py                    # SQLite and PostgreSQL
    .venv/bin/python benchmarks/metrics.py --skip-postgres

Measurement rows go in through SQLAlchemy Core inserts (invented values, one panel); the panel
states and holds are those of one registered panel. On PostgreSQL the table is ANALYZEd after
loading, as autovacuum would, so the planner's row estimate is current.
"""

from __future__ import annotations

import argparse
import sys
import time
import uuid
from pathlib import Path

from sqlalchemy import func, insert, select, text

sys.path.insert(0, str(Path(__file__).resolve().parent))

import _data

from app.db import Database
from app.services import metrics
from app.store.tables import Measurement


def _grow(db: Database, serial: str, rows: int) -> None:
    batch = 20_000
    for start in range(0, rows, batch):
        n = min(batch, rows - start)
        with db.transaction() as session:
            session.execute(insert(Measurement), [
                {"panel": serial, "id": uuid.uuid4(), "layer": 1 + i % 12, "side": "AB"[i % 2],
                 "frame": "facing_side", "exposure_tool": "EXP-1", "measured_at": _data.T0,
                 "received_at": _data.T0, "n_sites": 25, "superseded_by": None,
                 "source": "import", "key_label": "bench"} for i in range(n)])
    if db.engine.dialect.name == "postgresql":
        with db.engine.connect().execution_options(isolation_level="AUTOCOMMIT") as conn:
            conn.execute(text("ANALYZE measurements"))


def _best(fn, repeat: int) -> float:  # type: ignore[no-untyped-def]
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def run(url: str, small: int, large: int, repeat: int) -> None:
    db = _data.migrated(url)
    (serial,) = _data.serials(1)
    _data.register(db, [serial])
    requests = metrics.RequestMetrics()

    def scrape() -> None:
        metrics.exposition(db=db, requests=requests)

    def count_all() -> None:
        with db.reading() as session:
            session.scalar(select(func.count()).select_from(Measurement))

    figures = {}
    _grow(db, serial, small)
    figures["small"] = (_best(scrape, repeat), _best(count_all, repeat))
    _grow(db, serial, large - small)
    figures["large"] = (_best(scrape, repeat), _best(count_all, repeat))
    stored = [ln for ln in metrics.exposition(db=db, requests=requests).splitlines()
              if ln.startswith("stackledger_measurements_stored ")]
    db.close()
    (s_scrape, s_count), (l_scrape, l_count) = figures["small"], figures["large"]
    print(f"  {db.engine.dialect.name}: scrape {s_scrape * 1e3:.2f} ms at {small:,} rows, "
          f"{l_scrape * 1e3:.2f} ms at {large:,}: ratio {l_scrape / s_scrape:.2f} "
          f"(rows x{large / small:.0f}); {stored[0]}")
    print(f"  {db.engine.dialect.name}: full count(*) for comparison {s_count * 1e3:.2f} ms -> "
          f"{l_count * 1e3:.2f} ms: ratio {l_count / s_count:.2f}")


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--small", type=int, default=10_000)
    parser.add_argument("--large", type=int, default=500_000)
    parser.add_argument("--repeat", type=int, default=7)
    parser.add_argument("--skip-postgres", action="store_true")
    args = parser.parse_args()
    print(f"/metrics scrape, {args.small:,} vs {args.large:,} measurement rows "
          f"(best of {args.repeat})")
    with _data.tempdir() as tmp, _data.sqlite_url(Path(tmp)) as url:
        run(url, args.small, args.large, args.repeat)
    if args.skip_postgres:
        return
    if (why := _data.pg_available()) is not None:
        print(f"  postgresql: skipped ({why})")
        return
    with _data.pg_url() as url:
        run(url, args.small, args.large, args.repeat)


if __name__ == "__main__":
    main()
