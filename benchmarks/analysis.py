"""The FTB analysis at scale: one product, a one-week window, on a small and a large store; and
a pass over the whole product against recomputing the same figures with pandas from site rows.

    .venv/bin/python benchmarks/analysis.py                    # SQLite and PostgreSQL
    .venv/bin/python benchmarks/analysis.py --skip-postgres --large 30000

1. Two stores per database: --small and --large panels (the large one holds the small one's
   panels, identical, plus more). Production runs at --rate panels a day from T0; each panel has
   12 layers a side, one layer pair every day, side B 8 h after side A; tools, seeded terms. Panels,
   lots, measurements and fits go in through app.store.bulk.insert (COPY on PostgreSQL); sites
   are not stored (the analysis never reads them). The window is one week inside the small
   store's steady state, so it holds the same runs in both stores.
   Figures: fingerprints, shares and drift for the product in that window, best of --repeat,
   and the ratio large / small (target <= 1.5: read through indexes, not scans).
2. A pass over the whole product of the small store (fingerprints, shares, drift, no window)
   against pandas recomputing the fits from site rows and the per-tool means from those fits
   (groupby + numpy.linalg.lstsq per measurement) for --pandas-panels panels of the same
   scenario, both scaled to seconds per panel (target: >= 50 times faster).
Peak memory is the process's peak RSS (resource.getrusage). Prints figures; asserts nothing.
"""

from __future__ import annotations

import argparse
import sys
import time
import uuid
from collections.abc import Callable
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from sqlalchemy import insert, select, text

sys.path.insert(0, str(Path(__file__).resolve().parent))

import _data

from app.db import Database
from app.overlay.model import design_matrix, evaluate
from app.schemas.analysis import AnalysisFilter
from app.schemas.products import ProductCreate
from app.services import analysis_drift, analysis_ftb, analysis_tools, products
from app.store import bulk
from app.store.tables import Fit, Lot, Measurement, Panel, Product

T0 = datetime(2026, 6, 1, tzinfo=UTC)
LAYERS = 12
TOOLS = ("EXP-1", "EXP-2", "EXP-3", "EXP-4")
LOT_SIZE = 25
TARGET_WINDOW = 1.5
TARGET_PANDAS = 50.0


def _runs(first: int, count: int, rate: float, seed: int) -> dict[str, np.ndarray]:
    """Seeded runs of panels first..first+count-1 (each panel from its own seed stream)."""
    index = np.arange(first, first + count)
    rng = np.random.default_rng([seed, first])
    n = count * LAYERS * 2
    panel = np.repeat(index, LAYERS * 2)
    layer = np.tile(np.repeat(np.arange(1, LAYERS + 1), 2), count)
    side_b = np.tile(np.array([0, 1] * LAYERS, dtype=bool), count)
    start = index / rate  # days after T0
    days = np.repeat(start, LAYERS * 2) + (layer - 1) + side_b * (8 / 24)
    tool = rng.integers(0, len(TOOLS), n)
    terms = np.zeros((n, 8))
    terms[:, :2] = rng.normal(0, 2.0, (n, 2))
    terms[:, 2:6] = rng.normal(0, 3e-3, (n, 4))
    terms[tool == 1, :2] += 1.0  # one tool with a bias, so every figure has work to do
    return {"panel": panel, "layer": layer, "side_b": side_b, "days": days, "tool": tool,
            "terms": terms}


def _fill(db: Database, panels: int, rate: float, seed: int, product_id: int) -> None:
    """Panels, lots, measurements and fits, in chunks, through bulk inserts."""
    sqlite = db.engine.dialect.name == "sqlite"
    received = T0.strftime("%Y-%m-%d %H:%M:%S.%f") if sqlite else T0
    with db.transaction() as session:
        lots = [{"id": i + 1, "code": f"BL{i:06d}", "product_id": product_id, "created_at": T0}
                for i in range((panels + LOT_SIZE - 1) // LOT_SIZE)]
        session.execute(insert(Lot), lots)
        session.execute(insert(Panel), [
            {"serial": f"BP{i:07d}", "product_id": product_id, "lot_id": i // LOT_SIZE + 1,
             "status": "in_process", "created_at": T0} for i in range(panels)])
    chunk = 5000
    for first in range(0, panels, chunk):
        r = _runs(first, min(chunk, panels - first), rate, seed)
        ids = [uuid.uuid4() for _ in range(r["panel"].size)]
        serials = [f"BP{p:07d}" for p in r["panel"]]
        stamps = [T0 + timedelta(days=float(d)) for d in r["days"]]
        if sqlite:
            id_values: list[Any] = [u.hex for u in ids]
            stamp_values: list[Any] = [s.strftime("%Y-%m-%d %H:%M:%S.%f") for s in stamps]
        else:
            id_values, stamp_values = ids, stamps
        measurement_rows = (
            (s, i, int(layer), "B" if b else "A", "facing_side", TOOLS[t], when, received, 49, None,
             "import", "bench")
            for s, i, layer, b, t, when in zip(serials, id_values, r["layer"], r["side_b"],
                                               r["tool"], stamp_values, strict=True))
        fit_rows = (
            (s, i, "linear", "linear", None, *map(float, terms), 0.0, 0.0, 1.5, 1.5, 4.0, 0.0,
             0.0)
            for s, i, terms in zip(serials, id_values, r["terms"], strict=True))
        with db.transaction() as session:
            bulk.insert(session, Measurement.__table__, measurement_rows, stored_form=True)
            bulk.insert(session, Fit.__table__, fit_rows, stored_form=True)


def _store(url: str, panels: int, rate: float, seed: int) -> tuple[Database, float]:
    db = _data.migrated(url)
    started = time.perf_counter()
    _, product = products.create(db=db, data=ProductCreate(
        code="BENCHA", layers_per_side=LAYERS, flip_axis="y", panel_width_mm=510.0,
        panel_height_mm=515.0, ftb_limit_um=60.0, l2l_limit_um=12.0, model_terms=6),
        actor="bench")
    with db.reading() as session:
        product_id = session.scalars(select(Product.id).where(Product.code == product.code)).one()
    _fill(db, panels, rate, seed, product_id)
    if db.engine.dialect.name == "postgresql":
        with db.transaction() as session:
            session.execute(text("ANALYZE"))
    return db, time.perf_counter() - started


def _best(fn: Callable[[], Any], repeat: int) -> tuple[float, float]:
    """Best wall time and best CPU time of ``repeat`` runs (CPU time is what other jobs on a
    shared machine disturb least)."""
    wall, cpu = [], []
    for _ in range(repeat):
        started, cpu_started = time.perf_counter(), time.process_time()
        fn()
        wall.append(time.perf_counter() - started)
        cpu.append(time.process_time() - cpu_started)
    return min(wall), min(cpu)


def _figures(db: Database, window: AnalysisFilter) -> dict[str, Callable[[], Any]]:
    return {
        "fingerprints": lambda: analysis_tools.tool_fingerprints(db=db, filters=window),
        "shares": lambda: analysis_ftb.ftb_shares(db=db, filters=window),
        "drift": lambda: analysis_drift.tool_drift(db=db, filters=window),
    }


def _pandas_pass(panels: int, rate: float, seed: int) -> tuple[float, float, int]:
    """Site rows of ``panels`` panels rebuilt in memory, then fits and per-tool means in pandas."""
    r = _runs(0, panels, rate, seed)
    x, y = _data.site_grid()
    dx, dy = evaluate(r["terms"], x, y)
    rng = np.random.default_rng(seed + 1)
    n_runs, n_sites = dx.shape
    frame = pd.DataFrame({
        "run": np.repeat(np.arange(n_runs), n_sites),
        "tool": np.repeat(r["tool"], n_sites), "side_b": np.repeat(r["side_b"], n_sites),
        "x": np.tile(x, n_runs), "y": np.tile(y, n_runs),
        "dx": dx.ravel() + rng.normal(0, 1.5, dx.size),
        "dy": dy.ravel() + rng.normal(0, 1.5, dy.size),
    })
    started, cpu = time.perf_counter(), time.process_time()

    def fit(g: pd.DataFrame) -> pd.Series:
        a = design_matrix(g["x"].to_numpy(), g["y"].to_numpy())[:, :6]
        b = np.concatenate([g["dx"].to_numpy(), g["dy"].to_numpy()])
        coef = np.linalg.lstsq(a, b, rcond=None)[0]
        return pd.Series(coef, index=["tx", "ty", "sx", "sy", "ox", "oy"])

    fits = frame.groupby("run").apply(fit, include_groups=False)
    keys = frame.groupby("run")[["tool", "side_b"]].first()
    fits.join(keys).groupby(["tool", "side_b"]).agg(["mean", "std", "count"])
    return time.perf_counter() - started, time.process_time() - cpu, frame.shape[0]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--small", type=int, default=10_000)
    parser.add_argument("--large", type=int, default=100_000)
    parser.add_argument("--rate", type=float, default=300.0, help="panels started a day")
    parser.add_argument("--repeat", type=int, default=3)
    parser.add_argument("--pandas-panels", type=int, default=200)
    parser.add_argument("--seed", type=int, default=2026)
    parser.add_argument("--skip-postgres", action="store_true")
    parser.add_argument("--skip-sqlite", action="store_true")
    args = parser.parse_args()
    # A week inside the small store's steady state: panels take 12 days, so starts over
    # [w - 12, w + 7] must all exist in the small store.
    span = args.small / args.rate
    week_start = max(span - 7.0, 12.0)
    window = AnalysisFilter(product="BENCHA", start=T0 + timedelta(days=week_start),
                            end=T0 + timedelta(days=week_start + 7.0))
    print(f"stores: {args.small:,} and {args.large:,} panels ({args.small * 24:,} and "
          f"{args.large * 24:,} measurements), {args.rate:g} panels a day; window "
          f"{window.start:%Y-%m-%d} to {window.end:%Y-%m-%d}")
    databases = ([] if args.skip_sqlite else ["sqlite"]) + ([] if args.skip_postgres
                                                             else ["postgresql"])
    whole_per_panel: tuple[float, float] | None = None
    for kind in databases:
        if kind == "postgresql" and (why := _data.pg_available()):
            print(f"postgresql skipped: {why}")
            continue
        timings: dict[int, dict[str, tuple[float, float]]] = {}
        for panels in (args.small, args.large):
            with _data.tempdir() as tmp, (
                _data.sqlite_url(Path(tmp)) if kind == "sqlite" else _data.pg_url()
            ) as url:
                db, build = _store(url, panels, args.rate, args.seed)
                try:
                    timings[panels] = {name: _best(fn, args.repeat)
                                       for name, fn in _figures(db, window).items()}
                    print(f"{kind} {panels:>7,} panels: built in {build:6.1f} s; " + ", ".join(
                        f"{k} {v[0] * 1e3:7.1f} ms ({v[1] * 1e3:.0f} ms CPU)"
                        for k, v in timings[panels].items()))
                    if panels == args.small and whole_per_panel is None:
                        whole = AnalysisFilter(product="BENCHA")
                        measured = [_best(fn, 1) for fn in _figures(db, whole).values()]
                        total, cpu = sum(m[0] for m in measured), sum(m[1] for m in measured)
                        whole_per_panel = (total / panels, cpu / panels)
                        print(f"{kind} whole product ({panels:,} panels): {total:.2f} s "
                              f"({cpu:.2f} s CPU), {total / panels * 1e3:.3f} ms a panel")
                finally:
                    db.dispose()
        for name in timings[args.small]:
            wall = timings[args.large][name][0] / timings[args.small][name][0]
            cpu = timings[args.large][name][1] / timings[args.small][name][1]
            print(f"{kind} {name}: large / small = {wall:.2f} wall, {cpu:.2f} CPU "
                  f"(target <= {TARGET_WINDOW})")
    seconds, cpu, rows = _pandas_pass(args.pandas_panels, args.rate, args.seed)
    per_panel = seconds / args.pandas_panels
    print(f"pandas from {rows:,} site rows ({args.pandas_panels} panels): {seconds:.2f} s "
          f"({cpu:.2f} s CPU), {per_panel * 1e3:.2f} ms a panel (fits and per-tool means only)")
    if whole_per_panel:
        print(f"whole-product pass vs pandas: {per_panel / whole_per_panel[0]:.1f} times faster "
              f"by wall time, {cpu / args.pandas_panels / whole_per_panel[1]:.1f} by CPU time "
              f"(target >= {TARGET_PANDAS:g})")
    print(f"peak memory (RSS): {_data.peak_rss_mb():.0f} MB")


if __name__ == "__main__":
    main()
