"""Calibration of the forecast and the stability of risk levels, on a simulated line posted
through the real service.

    .venv/bin/python benchmarks/calibration.py                   # the default run (~3 min)
    .venv/bin/python benchmarks/calibration.py --warm-lots 12 --lots 6 --new-lots 4  # quicker

The line (``line_sim.py``) runs staggered lots of two products on the same exposure tools:

- LINE50, the steady-state product: ``--warm-lots`` lots go first (history; with one lot
  starting per time step, lot 23 starts when 12 lots, 300 panels, have completed), then
  ``--lots`` lots are scored;
- NEW50, a new product with no history, started together with the scored LINE50 lots:
  ``--new-lots`` lots, every one scored (the first twelve start before any NEW50 panel has
  completed, so the forecast runs from the prior into history as the product's panels complete).

Both products: 12 + 12 layers, FTB limit 50 um, L2L limit 12 um. Each time step's measurements
of every lot in progress go to ``POST /api/v1/imports`` as one CSV (fastapi TestClient on
``app.main.create_app``, a throwaway SQLite store migrated with ``app.store.migrate.upgrade``,
an admin key from ``app.services.keys``). After each step the stored panel states are read back
with one read-only query (p_exceed, risk, forecast terms).

Printed, for each product: per layer 3, 6, 9 the sum of predicted p against actual failures,
Brier score and skill, a reliability table; per panel the false alarm, miss and hit rates (flag
= at_risk or over_limit at some state by layer 9) and the median layer of first flag; the
flapping share; the same for the watch list (watch or worse), the early warning; the z-score of
the final FTB scale term (Sx) of the growing-core-scale panels after layer 3; the oracle bound
of ``calibration_oracle.py`` on the same panels; and the forecast's cost: time in
``panel_estimate._forecast`` against the wall time of the import POSTs, measured in this run.
Rates come with their binomial standard error.
"""

from __future__ import annotations

import argparse
import io
import os
import sys
import tempfile
import time
import warnings
from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from _data import Timer
from calibration_oracle import flags as oracle_flags
from calibration_oracle import oracle_p
from calibration_scores import layer_score, panel_scores, print_sweep, print_watch, z_scores
from line_sim import Line, LineConfig, Lot

T0 = datetime(2026, 11, 2, 6, 0, tzinfo=UTC)
CHECK_LAYERS = (3, 6, 9)


@dataclass
class Track:
    """What the store said about each panel of one product after each layer pair."""

    lots: list[Lot] = field(default_factory=list)
    scored: set[str] = field(default_factory=set)
    p: dict[str, np.ndarray] = field(default_factory=dict)
    flag: dict[str, np.ndarray] = field(default_factory=dict)
    listed: dict[str, np.ndarray] = field(default_factory=dict)  # watch or worse
    sx: dict[str, tuple[float, float]] = field(default_factory=dict)  # after layer 3: mean, sd


def _csv(line: Line, work: list[tuple[Lot, int]], step: int) -> bytes:
    out = io.StringIO()
    out.write("panel,layer,side,frame,exposure_tool,measured_at,x_mm,y_mm,dx_um,dy_um\n")
    for lot, layer in work:
        for serial, side, tool, rows in line.measurements(lot, layer):
            at = (T0 + timedelta(hours=4 * step, minutes=30 if side == "B" else 0)).isoformat()
            head = f"{serial},{layer},{side},facing_side,{tool},{at},"
            out.writelines(head + f"{x:.3f},{y:.3f},{dx:.4f},{dy:.4f}\n" for x, y, dx, dy in rows)
    return out.getvalue().encode()


def _product(code: str, c: LineConfig) -> dict[str, Any]:
    return {"code": code, "layers_per_side": c.layers, "flip_axis": c.flip_axis,
            "panel_width_mm": c.panel_width_mm, "panel_height_mm": c.panel_height_mm,
            "ftb_limit_um": c.ftb_limit_um, "l2l_limit_um": c.l2l_limit_um, "model_terms": 6}


def run(args: argparse.Namespace) -> dict[str, Any]:
    warnings.filterwarnings("ignore", message=".*httpx.*")
    from fastapi.testclient import TestClient
    from sqlalchemy import select

    from app.config import get_settings
    from app.db import Database
    from app.main import create_app
    from app.services import keys, panel_estimate
    from app.store.migrate import upgrade
    from app.store.tables import PanelEstimate

    tmp = tempfile.TemporaryDirectory(prefix="stackledger_calibration_")
    url = f"sqlite:///{Path(tmp.name) / 'line.db'}"
    os.environ["STACKLEDGER_DATABASE_URL"] = url
    get_settings.cache_clear()

    db = Database(url)
    upgrade(db.engine)
    key, _ = keys.create(db=db, role="admin", label="calibration")
    client = TestClient(create_app(db), raise_server_exceptions=True)
    headers = {"Authorization": f"Bearer {key}"}
    config = LineConfig()
    line = Line(config, seed=args.seed)
    products = {"LINE50": Track(), "NEW50": Track()}
    for code in products:
        r = client.post("/api/v1/products", json=_product(code, config), headers=headers)
        assert r.status_code in (200, 201), r.text

    starts: list[tuple[int, str, str, bool]] = []  # step, product, lot code, scored
    for j in range(args.warm_lots + args.lots):
        starts.append((j, "LINE50", f"S{j:03d}", j >= args.warm_lots))
    for j in range(args.new_lots):
        starts.append((args.warm_lots + j, "NEW50", f"N{j:03d}", True))
    last_step = max(s for s, *_ in starts) + config.layers

    timer = Timer()
    timer.wrap(panel_estimate, "_forecast")
    post_s = 0.0
    active: list[tuple[str, Lot]] = []
    for step in range(last_step):
        for s, code, lot_code, scored in starts:
            if s != step:
                continue
            lot = line.new_lot(lot_code, step, prefix=code[:1])
            track = products[code]
            track.lots.append(lot)
            for serial in lot.serials:
                r = client.post("/api/v1/panels", headers=headers,
                                json={"serial": serial, "product": code, "lot": lot_code})
                assert r.status_code == 201, r.text
                if scored:
                    track.scored.add(serial)
                    track.p[serial] = np.full(config.layers, np.nan)
                    track.flag[serial] = np.zeros(config.layers, dtype=bool)
                    track.listed[serial] = np.zeros(config.layers, dtype=bool)
            active.append((code, lot))
        work = [(lot, step - lot.start_step + 1) for _, lot in active]
        work = [(lot, k) for lot, k in work if 1 <= k <= config.layers]
        if not work:
            continue
        body = _csv(line, work, step)
        t = time.perf_counter()
        r = client.post("/api/v1/imports", headers=headers,
                        files={"file": (f"step{step}.csv", body, "text/csv")})
        post_s += time.perf_counter() - t
        assert r.status_code == 201, r.text
        layer_of = {serial: k for lot, k in work for serial in lot.serials}
        with db.reading() as session:
            rows = session.execute(
                select(PanelEstimate.panel, PanelEstimate.p_exceed, PanelEstimate.risk,
                       PanelEstimate.forecast).where(PanelEstimate.panel.in_(list(layer_of)))
            ).all()
        for serial, p, risk, forecast in rows:
            track = products["LINE50" if serial.startswith("L") else "NEW50"]
            if serial not in track.scored:
                continue
            k = layer_of[serial]
            track.p[serial][k - 1] = p if p is not None else np.nan
            track.flag[serial][k - 1] = risk in ("at_risk", "over_limit")
            track.listed[serial][k - 1] = risk != "clear"
            if k == 3 and forecast is not None and forecast.final_terms:
                track.sx[serial] = (forecast.final_terms[2], forecast.final_terms_sd[2])
        if args.verbose:
            print(f"step {step}: {len(work)} lots, {len(body) / 1e6:.1f} MB, "
                  f"{time.perf_counter() - t:.1f} s", flush=True)
    timer.restore()
    client.close()
    db.close()
    tmp.cleanup()
    return {"products": products, "line": line, "forecast_s": timer.seconds.get("_forecast", 0.0),
            "forecast_calls": timer.calls.get("_forecast", 0), "post_s": post_s}


def report(name: str, track: Track, line: Line) -> None:
    serials, fails, growing, sx_true = [], [], [], []
    for lot in track.lots:
        worst = line.final_ftb_worst(lot)
        ftb = lot.terms[:, 0].sum(axis=1) - lot.terms[:, 1].sum(axis=1)
        for i, serial in enumerate(lot.serials):
            if serial in track.scored:
                serials.append(serial)
                fails.append(worst[i] > line.config.ftb_limit_um)
                growing.append(lot.growing[i])
                sx_true.append(ftb[i, 2])
    y = np.array(fails)
    p = np.array([track.p[s] for s in serials])
    flag = np.array([track.flag[s] for s in serials])
    print(f"\n== {name}: {len(serials)} panels scored, {int(y.sum())} fail "
          f"(base rate {y.mean():.3f})")
    print("layer   n  sum p  fails  ratio  Brier  skill")
    for k in CHECK_LAYERS:
        sc = layer_score(p[:, k - 1], y, k)
        print(f"{k:5d} {sc.n:3d} {sc.sum_p:6.1f} {sc.failures:6d} {sc.ratio:6.2f} "
              f"{sc.brier:6.3f} {sc.skill:6.2f}")
        for lo, hi, n, mp, obs in sc.reliability:
            print(f"        p in [{lo:.2f}, {hi:.2f}): n {n:4d}, mean p {mp:.3f}, "
                  f"observed {obs:.3f}")
    ps = panel_scores(flag, y, by=9)
    print_sweep(p, y)
    print(f"false alarm (passing flagged by layer 9): {ps.false_alarm}")
    print(f"miss (failing never flagged by layer 9):  {ps.miss}")
    print(f"hit (flagged by layer 9 that fail):        {ps.hit}")
    print(f"median layer of first flag (failing):      {ps.first_flag_median:.1f}")
    print(f"flapping (out of flagged at least twice):  {ps.flapping}")
    print_watch(np.array([track.listed[s] for s in serials]), y)
    # What no forecast can beat on these panels: the oracle that knows all but the randomness
    # still to come (calibration_oracle.py), with the default at-risk rule.
    rng = np.random.default_rng(1)
    scored_lots = [lot for lot in track.lots if lot.serials[0] in track.scored]
    po = np.concatenate([np.stack([oracle_p(line, lot, k, 1000, rng)
                                   for k in range(1, line.config.layers + 1)], axis=1)
                         for lot in scored_lots])
    yo = np.concatenate([line.final_ftb_worst(lot) > line.config.ftb_limit_um
                         for lot in scored_lots])
    po_scores = panel_scores(oracle_flags(po), yo, by=9)
    print(f"oracle bound: skill after layer 3 {layer_score(po[:, 2], yo, 3).skill:.2f}; "
          f"default flags: false alarm {po_scores.false_alarm.value:.3f}, miss "
          f"{po_scores.miss.value:.3f}, hit {po_scores.hit.value:.3f}")
    g = np.array(growing)
    mean_sd = np.array([track.sx.get(s, (np.nan, np.nan)) for s in serials])
    z = z_scores(np.array(sx_true)[g], mean_sd[g, 0], mean_sd[g, 1])
    z = z[np.isfinite(z)]
    if z.size:
        print(f"growing core scale, final Sx after layer 3: mean z {z.mean():+.2f} "
              f"(se {z.std(ddof=1) / np.sqrt(z.size):.2f}), sd z {z.std(ddof=1):.2f}, "
              f"n {z.size}")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--warm-lots", type=int, default=23)
    ap.add_argument("--lots", type=int, default=16)
    ap.add_argument("--new-lots", type=int, default=12)
    ap.add_argument("--seed", type=int, default=2026)
    ap.add_argument("--verbose", action="store_true")
    args = ap.parse_args()
    t = time.perf_counter()
    out = run(args)
    for name, track in out["products"].items():
        report(name, track, out["line"])
    share = out["forecast_s"] / out["post_s"] if out["post_s"] else float("nan")
    print(f"\nforecast cost: {out['forecast_s']:.1f} s in {out['forecast_calls']} forecasts "
          f"of {out['post_s']:.1f} s of import POSTs: share {share:.1%}")
    print(f"run time {time.perf_counter() - t:.0f} s")


if __name__ == "__main__":
    main()
