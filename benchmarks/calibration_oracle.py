"""How well could any forecast do on the simulated line? An oracle bound for the targets.

    .venv/bin/python benchmarks/calibration_oracle.py            # LINE50's scored lots, ~1 min

The oracle knows everything about each panel that the line's process has fixed by layer k: the
true terms of its layers so far (no fit noise), its constant offset, the level its random walk
has reached, whether and how it drifts or grows, and every exposure tool's bias and drift for
every layer to come. What no forecast can know is what is still random at layer k: the layer
scatter of the remaining layers and the future steps of the random walk. The oracle's P(final
worst FTB > limit) after layer k is the Monte Carlo share of the final FTBs made by replacing
exactly those parts of the true panel with fresh draws from the line's own distributions.

Flags follow the product's default rule (``RiskThresholds``: at risk from P >= p_at_risk, left
below p_at_risk_leave). If even the oracle cannot reach false alarm <= 0.10, miss <= 0.05 and
hit >= 0.50 at once, then those targets are out of reach of any forecast on this line: the
outcome is decided by randomness still to come.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from calibration_scores import layer_score, panel_scores, print_sweep
from line_sim import PPM, Line, Lot

from app.overlay.model import design_matrix
from app.overlay.risk import RiskThresholds

#: The product defaults of the risk thresholds (the limits here are placeholders).
DEFAULTS = RiskThresholds(ftb_limit_um=1.0, l2l_limit_um=1.0)


def oracle_p(line: Line, lot: Lot, k: int, samples: int, rng: np.random.Generator) -> np.ndarray:
    """P(final worst FTB > limit) per panel of the lot, knowing all but the future randomness."""
    c = line.config
    assert lot.scatter is not None and lot.walk is not None
    n, big_l = len(lot.serials), c.layers
    future = np.arange(big_l) >= k  # layers k+1.. (0-based k..)
    sign = np.array([1.0, -1.0])
    # The true final FTB terms less the future randomness.
    ftb = lot.terms[:, 0].sum(axis=1) - lot.terms[:, 1].sum(axis=1)
    walk_future = lot.walk[:, :, future] - lot.walk[:, :, k - 1:k]  # k >= 1
    known = ftb - np.einsum("s,nslt->nt", sign, lot.scatter[:, :, future])
    known[:, :2] -= np.einsum("s,nslt->nt", sign, walk_future)
    m = int(future.sum())
    draws = np.zeros((samples, n, 2, m, 8))
    draws[..., :2] = rng.normal(0.0, c.layer_translation_um, (samples, n, 2, m, 2))
    draws[..., 2:4] = rng.normal(0.0, c.layer_scale_ppm, (samples, n, 2, m, 2)) * PPM
    rot = rng.normal(0.0, c.layer_rotation_urad, (samples, n, 2, m)) * PPM
    draws[..., 4] = rot
    draws[..., 5] = rot
    steps = np.cumsum(rng.normal(0.0, c.walk_um, (samples, n, 2, m, 2)), axis=3)
    draws[..., :2] += steps
    final = known[None] + np.einsum("s,knslt->knt", sign, draws)
    design = design_matrix(line.points[:, 0], line.points[:, 1]).T
    values = final @ design
    p_count = line.points.shape[0]
    worst = np.hypot(values[..., :p_count], values[..., p_count:]).max(axis=2)
    out: np.ndarray = (worst > c.ftb_limit_um).mean(axis=0)
    return out


def flags(p: np.ndarray, enter: float = DEFAULTS.p_at_risk,
          leave: float = DEFAULTS.p_at_risk_leave) -> np.ndarray:
    """At-risk flags per state with the product's default hysteresis (P-only)."""
    out = np.zeros(p.shape, dtype=bool)
    state = np.zeros(p.shape[0], dtype=bool)
    for k in range(p.shape[1]):
        state = np.where(state, p[:, k] >= leave, p[:, k] >= enter)
        out[:, k] = state
    return out


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--warm-lots", type=int, default=23)
    ap.add_argument("--lots", type=int, default=16)
    ap.add_argument("--samples", type=int, default=2000)
    ap.add_argument("--seed", type=int, default=2026)
    args = ap.parse_args()
    t = time.perf_counter()
    line = Line(seed=args.seed)
    lots = [line.new_lot(f"S{j:03d}", j, prefix="L") for j in range(args.warm_lots + args.lots)]
    scored = lots[args.warm_lots:]
    rng = np.random.default_rng(args.seed + 1)
    c = line.config
    p = np.concatenate([
        np.stack([oracle_p(line, lot, k, args.samples, rng) for k in range(1, c.layers + 1)],
                 axis=1)
        for lot in scored
    ])
    y = np.concatenate([line.final_ftb_worst(lot) > c.ftb_limit_um for lot in scored])
    print(f"oracle bound, seed {args.seed}: {len(y)} panels scored, {int(y.sum())} fail")
    print("layer  sum p  fails  Brier  skill")
    for k in (3, 6, 9):
        sc = layer_score(p[:, k - 1], y, k)
        print(f"{k:5d} {sc.sum_p:6.1f} {sc.failures:6d} {sc.brier:6.3f} {sc.skill:6.2f}")
    ps = panel_scores(flags(p), y, by=9)
    print(f"flags with the default hysteresis {DEFAULTS.p_at_risk:.2f} / "
          f"{DEFAULTS.p_at_risk_leave:.2f}: false alarm {ps.false_alarm}, miss {ps.miss}, "
          f"hit {ps.hit}")
    print_sweep(p, y)
    print(f"run time {time.perf_counter() - t:.0f} s")


if __name__ == "__main__":
    main()
