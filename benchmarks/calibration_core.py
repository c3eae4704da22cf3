"""The calibration scores of ``calibration.py`` on the numeric core alone (no store, no HTTP).

    .venv/bin/python benchmarks/calibration_core.py               # LINE50-like, ~1-2 min
    .venv/bin/python benchmarks/calibration_core.py --seed 7 --warm-lots 23 --lots 16

The same simulated line (``line_sim.py``) through ``line_core.run_core``: the observed terms are
the true terms plus the least-squares fit noise, the history is learned by the core from the
complete and in-process panels before each step. It is quicker than the service run, so it can
compare models and other simulated lines (``--seed``, ``--drift-share``, ``--drift-um``,
``--growth-share``, ``--walk-um``, ``--offset-um``; ``--warm-lots 0 --lots 12`` is a new
product with no history); the main figures in docs/forecast.md come from ``calibration.py``
through the service.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from calibration_scores import layer_score, panel_scores, print_sweep, print_watch, z_scores
from line_core import run_core
from line_sim import Line, add_line_options, line_config

CHECK_LAYERS = (3, 6, 9)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--warm-lots", type=int, default=23)
    ap.add_argument("--lots", type=int, default=16)
    ap.add_argument("--seed", type=int, default=2026)
    add_line_options(ap)
    args = ap.parse_args()
    config = line_config(args)
    t = time.perf_counter()
    line = Line(config, seed=args.seed)
    run = run_core(line, lots=args.warm_lots + args.lots, score_from=args.warm_lots)
    scored = [lot for lot in run.lots if lot.start_step >= args.warm_lots]
    serials = [s for lot in scored for s in lot.serials]
    y = np.concatenate([line.final_ftb_worst(lot) > config.ftb_limit_um for lot in scored])
    p = np.array([run.p[s] for s in serials])
    flag = np.array([[lv in ("at_risk", "over_limit") for lv in run.level[s]] for s in serials])
    print(f"{len(serials)} panels scored, {int(y.sum())} fail (base rate {y.mean():.3f})")
    print("layer   n  sum p  fails  ratio  Brier  skill")
    for k in CHECK_LAYERS:
        sc = layer_score(p[:, k - 1], y, k)
        print(f"{k:5d} {sc.n:3d} {sc.sum_p:6.1f} {sc.failures:6d} {sc.ratio:6.2f} "
              f"{sc.brier:6.3f} {sc.skill:6.2f}")
    print_sweep(p, y)
    ps = panel_scores(flag, y, by=9)
    print(f"false alarm (passing flagged by layer 9): {ps.false_alarm}")
    print(f"miss (failing never flagged by layer 9):  {ps.miss}")
    print(f"hit (flagged by layer 9 that fail):        {ps.hit}")
    print(f"median layer of first flag (failing):      {ps.first_flag_median:.1f}")
    print(f"flapping (out of flagged at least twice):  {ps.flapping}")
    print_watch(np.array([[lv != "clear" for lv in run.level[s]] for s in serials]), y)
    for label, group in (("growing core scale", "growing"), ("all panels", None)):
        truth, mean, sd = [], [], []
        for lot in scored:
            ftb = lot.terms[:, 0].sum(axis=1) - lot.terms[:, 1].sum(axis=1)
            for i, serial in enumerate(lot.serials):
                if group is None or lot.growing[i]:
                    f = run.after3[serial]
                    truth.append(ftb[i, 2])
                    mean.append(f.final_mean_terms[2])
                    sd.append(float(np.sqrt(f.final_cov_terms[2, 2])))
        z = z_scores(np.array(truth), np.array(mean), np.array(sd))
        z = z[np.isfinite(z)]
        print(f"{label}, final Sx after layer 3: mean z {z.mean():+.2f} "
              f"(se {z.std(ddof=1) / np.sqrt(z.size):.2f}), sd z {z.std(ddof=1):.2f}, n {z.size}")
    print(f"run time {time.perf_counter() - t:.0f} s")


if __name__ == "__main__":
    main()
