"""Throughput of the numeric core: batched fits and stack accumulation.

Run with ``python benchmarks/core.py``. Prints figures only; nothing here asserts on time.

- Fits per second of 10,000 measurements of 49 sites (7 x 7 grid over a 510 x 515 mm panel,
  seeded noise) through ``fit_many``, against a loop of ``numpy.linalg.lstsq`` one measurement
  at a time on the same data (design built per measurement, solve only: no residual
  statistics or result objects, so the loop does less than ``fit_many``). Twice: with every
  measurement on the same grid, as a tool that measures its target grid each time gives, where
  ``fit_many`` shares one solve operator per layout; and with the grid jittered per measurement
  (0.05 mm per site), so that every layout is distinct and the batched path does all the work.
  The split between numerics and result building (statistics from the residual sums and the
  10,000 ``OverlayFit`` objects) comes from timing the private result step on its own.
- The time to accumulate 24 layers (12 + 12) at 25 check points, as a ratio to one
  ``fit_measurement`` call.

Best of a few repeats with ``time.perf_counter``.
"""

from __future__ import annotations

import time
from collections.abc import Callable

import numpy as np

from app.overlay import _lsq
from app.overlay.fit import OverlayFit, _make_fits, _results, fit_many, fit_measurement
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


def measurements(seed: int = 0, jitter_mm: float = 0.0) -> tuple[np.ndarray, ...]:
    """Concatenated sites of N_MEASUREMENTS measurements: x, y, dx, dy (N*49,) and counts.

    ``jitter_mm`` > 0 moves every site of every measurement off the grid by that sigma, so that
    no two measurements share a layout.
    """
    rng = np.random.default_rng(seed)
    pts = default_check_points(PANEL_W, PANEL_H, n=GRID, fraction=0.9)
    x = np.tile(pts[:, 0], (N_MEASUREMENTS, 1))
    y = np.tile(pts[:, 1], (N_MEASUREMENTS, 1))
    if jitter_mm > 0.0:
        x = x + rng.normal(0.0, jitter_mm, x.shape)
        y = y + rng.normal(0.0, jitter_mm, y.shape)
    scale = np.array([3.0, 3.0, 5e-3, 5e-3, 5e-3, 5e-3, 0.0, 0.0])
    terms = rng.normal(size=(N_MEASUREMENTS, 8)) * scale
    dx, dy = evaluate(terms, x, y)  # x, y (N, 49) broadcast against terms (N, 1, 8)
    dx = dx + rng.normal(0.0, 0.8, dx.shape)
    dy = dy + rng.normal(0.0, 0.8, dy.shape)
    counts = np.full(N_MEASUREMENTS, GRID * GRID)
    return x.ravel(), y.ravel(), dx.ravel(), dy.ravel(), counts


def lstsq_loop(x: np.ndarray, y: np.ndarray, dx: np.ndarray, dy: np.ndarray, n: int) -> None:
    for j in range(x.size // n):
        s = slice(j * n, (j + 1) * n)
        a = design_matrix(x[s], y[s])[:, :6]
        np.linalg.lstsq(a, np.concatenate([dx[s], dy[s]]), rcond=None)


def result_times(x: np.ndarray, y: np.ndarray, dx: np.ndarray, dy: np.ndarray) -> tuple[float, ...]:
    """Seconds for fit_many's result step (statistics from the solver's residual sums, and the
    objects), for its objects alone, and for those objects through the OverlayFit constructor."""
    shape = (N_MEASUREMENTS, GRID * GRID)
    xs, ys, dxs, dys = (a.reshape(shape) for a in (x, y, dx, dy))
    solution = _lsq.solve_group(xs, ys, dxs, dys, "linear")
    best = float("inf")
    for _ in range(5):
        # _results freezes the terms it is given: a fresh copy each time.
        fresh = solution._replace(terms=solution.terms.copy())
        start = time.perf_counter()
        _results(xs, ys, fresh, "linear")
        best = min(best, time.perf_counter() - start)
    fits = fit_many(x, y, dx, dy, np.full(N_MEASUREMENTS, GRID * GRID))
    columns = [[getattr(f, name) for f in fits] for name in OverlayFit.__dataclass_fields__]
    t_objects = best_of(lambda: _make_fits(len(fits), columns), repeats=5)
    rows = list(zip(*columns, strict=True))
    t_init = best_of(lambda: [OverlayFit(*values) for values in rows], repeats=5)
    return best, t_objects, t_init


def compare(label: str, data: tuple[np.ndarray, ...]) -> None:
    x, y, dx, dy, counts = data
    n = GRID * GRID
    fit_many(x, y, dx, dy, counts)  # warm-up
    t_many = best_of(lambda: fit_many(x, y, dx, dy, counts), repeats=10)
    t_loop = best_of(lambda: lstsq_loop(x, y, dx, dy, n), repeats=3)
    t_results, t_objects, t_init = result_times(x, y, dx, dy)
    print(label)
    print(f"  fit_many      : {N_MEASUREMENTS / t_many:12,.0f} fits/s  ({t_many * 1e3:7.1f} ms)")
    print(f"  lstsq loop    : {N_MEASUREMENTS / t_loop:12,.0f} fits/s  ({t_loop * 1e3:7.1f} ms)")
    print(f"  speed-up      : {t_loop / t_many:12.1f} x")
    print(
        f"  of which result building: {t_results * 1e3:.1f} ms "
        f"({t_results / t_many:.0%}); numeric part ~{(t_many - t_results) * 1e3:.1f} ms, "
        f"{t_loop / (t_many - t_results):.1f} x the loop"
    )
    print(
        f"  objects alone: {t_objects * 1e3:.1f} ms "
        f"({t_init * 1e3:.1f} ms through the OverlayFit constructor)"
    )


def main() -> None:
    compare(
        f"{N_MEASUREMENTS:,} measurements x {GRID * GRID} sites, all on one shared {GRID}x{GRID} "
        "grid layout (one solve operator for all):",
        measurements(),
    )
    compare(
        f"{N_MEASUREMENTS:,} measurements x {GRID * GRID} sites, grid jittered per measurement "
        "(0.05 mm): all layouts distinct:",
        measurements(jitter_mm=0.05),
    )
    x, y, dx, dy, _ = measurements()
    n = GRID * GRID

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
