"""Throughput of the numeric core: batched fits and stack accumulation.

Run with ``python benchmarks/core.py``. Prints figures only; nothing here asserts on time.

- Fits per second of 10,000 measurements of 49 sites (7 x 7 grid over a 510 x 515 mm panel,
  seeded noise) through ``fit_many``, against a loop of ``numpy.linalg.lstsq`` one measurement
  at a time on the same data (design built per measurement, solve only: no residual
  statistics or result objects, so the loop does less than ``fit_many``).
- The time to accumulate 24 layers (12 + 12) at 25 check points, as a ratio to one
  ``fit_measurement`` call.

Best of a few repeats with ``time.perf_counter``.
"""

from __future__ import annotations

import time
from collections.abc import Callable

import numpy as np

from app.overlay.fit import OverlayFit, fit_many, fit_measurement
from app.overlay.frames import mirror_terms
from app.overlay.model import design_matrix, evaluate
from app.overlay.stack import accumulate, default_check_points

N_MEASUREMENTS = 10_000
GRID = 7
PANEL_W, PANEL_H = 510.0, 515.0


def best_of(fn: Callable[[], object], repeats: int) -> float:
    """Shortest wall time of ``repeats`` calls, in seconds."""
    best = float("inf")
    for _ in range(repeats):
        start = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - start)
    return best


def measurements(seed: int = 0) -> tuple[np.ndarray, ...]:
    """Concatenated sites of N_MEASUREMENTS measurements: x, y, dx, dy (N*49,) and counts."""
    rng = np.random.default_rng(seed)
    pts = default_check_points(PANEL_W, PANEL_H, n=GRID, fraction=0.9)
    scale = np.array([3.0, 3.0, 5e-3, 5e-3, 5e-3, 5e-3, 0.0, 0.0])
    terms = rng.normal(size=(N_MEASUREMENTS, 8)) * scale
    dx, dy = evaluate(terms, pts[:, 0], pts[:, 1])
    dx = dx + rng.normal(0.0, 0.8, dx.shape)
    dy = dy + rng.normal(0.0, 0.8, dy.shape)
    x = np.tile(pts[:, 0], N_MEASUREMENTS)
    y = np.tile(pts[:, 1], N_MEASUREMENTS)
    counts = np.full(N_MEASUREMENTS, GRID * GRID)
    return x, y, dx.ravel(), dy.ravel(), counts


def lstsq_loop(x: np.ndarray, y: np.ndarray, dx: np.ndarray, dy: np.ndarray, n: int) -> None:
    for j in range(x.size // n):
        s = slice(j * n, (j + 1) * n)
        a = design_matrix(x[s], y[s])[:, :6]
        np.linalg.lstsq(a, np.concatenate([dx[s], dy[s]]), rcond=None)


def main() -> None:
    x, y, dx, dy, counts = measurements()
    n = GRID * GRID
    fit_many(x, y, dx, dy, counts)  # warm-up
    t_many = best_of(lambda: fit_many(x, y, dx, dy, counts), repeats=10)
    t_loop = best_of(lambda: lstsq_loop(x, y, dx, dy, n), repeats=3)
    print(f"fit_many        : {N_MEASUREMENTS / t_many:12,.0f} fits/s  ({t_many * 1e3:7.1f} ms)")
    print(f"lstsq loop      : {N_MEASUREMENTS / t_loop:12,.0f} fits/s  ({t_loop * 1e3:7.1f} ms)")
    print(f"speed-up        : {t_loop / t_many:12.1f} x")
    # The contract returns one frozen OverlayFit per measurement; building them is a fixed
    # Python cost that the bare lstsq loop does not pay.
    fits = fit_many(x, y, dx, dy, counts)
    fields = [tuple(getattr(f, name) for name in OverlayFit.__dataclass_fields__) for f in fits]
    t_objects = best_of(lambda: [OverlayFit(*values) for values in fields], repeats=5)
    print(
        f"  of which result objects alone: {t_objects * 1e3:.1f} ms "
        f"({t_objects / t_many:.0%}); numeric part ~{(t_many - t_objects) * 1e3:.1f} ms, "
        f"{t_loop / (t_many - t_objects):.1f} x the loop"
    )

    rng = np.random.default_rng(1)
    scale = np.array([3.0, 3.0, 5e-3, 5e-3, 5e-3, 5e-3, 2e-5, 2e-5])
    terms_a = rng.normal(size=(12, 8)) * scale
    terms_b = mirror_terms(rng.normal(size=(12, 8)) * scale, side="B", flip_axis="y")
    points = default_check_points(PANEL_W, PANEL_H)
    var = np.full((12, 2), 0.5)
    one = slice(0, n)

    def stack() -> None:
        accumulate(terms_a, terms_b, points, residual_var_a=var, residual_var_b=var)

    def single() -> None:
        fit_measurement(x[one], y[one], dx[one], dy[one])

    calls = 1000
    t_stack = best_of(lambda: [stack() for _ in range(calls)], repeats=5) / calls
    t_fit = best_of(lambda: [single() for _ in range(calls)], repeats=5) / calls
    print(f"accumulate 12+12: {t_stack * 1e6:10.1f} us per call at {len(points)} points")
    print(f"fit_measurement : {t_fit * 1e6:10.1f} us per call ({n} sites)")
    print(f"ratio           : {t_stack / t_fit:12.2f} x one fit_measurement")


if __name__ == "__main__":
    main()
