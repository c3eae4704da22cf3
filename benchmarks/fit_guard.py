"""The fit guard and the capture check, by seeded simulation: what a fit claims at the check
points against what its sites can say, and what the miss probability costs.

    .venv/bin/python benchmarks/fit_guard.py [--trials 2000]

1. For site layouts from four sites in a 10 mm square to a 7 x 7 grid over the panel, 1 um of
   site noise per axis and no true overlay: the median and 95th percentile of the fitted model's
   largest vector over the default check points (5 x 5 over the central 90 % of a 510 x 515 mm
   panel), unguarded (``fit_measurement`` without a reach) and guarded (with ``reach_of`` the
   check points), the model each ends up with, and the guarded fit's largest leverage. A model
   that knows nothing has a worst vector of zero here; what is printed is pure noise carried to
   the check points.
2. How often the L2L check, allowing two of the fit's own standard errors
   (``risk.SE_FACTOR``), calls a layer over a 12 um limit when its true offset is 11 um
   (a false call) or 13.5 um (a true one), 5 x 5 sites over the panel, 1.5 um noise; against
   the bare comparison of the fitted offset with the limit.
3. Time of ``capture.capture_all`` for 24 interfaces at 25 check points (the quadrature path:
   unequal sigmas), as the state rebuild of every POST runs it, as a ratio to one
   ``fit_measurement`` of 49 sites.

4. The capture step's share of a POST /api/v1/measurements: a SQLite store with the benchmark
   product given via settings (``_data.PRODUCT`` plus 35 um vias on 65 um pads), --posts posts
   of layers 1..5 of new panels through fastapi's TestClient with a tool key;
   ``panel_estimate.capture_all`` and ``measurements.accept`` are wrapped to sum their time.

Seeds are fixed; prints figures, asserts nothing.
"""

from __future__ import annotations

import argparse
import sys
import time
import warnings
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

import _data

from app.overlay.capture import ViaGeometry, capture_all, interface_capture
from app.overlay.fit import fit_measurement, reach_of
from app.overlay.model import evaluate
from app.overlay.risk import SE_FACTOR
from app.overlay.stack import default_check_points

POINTS = default_check_points(510.0, 515.0)
REACH = reach_of(POINTS)


def layout(n: int, half_mm: float) -> tuple[np.ndarray, np.ndarray]:
    g = np.linspace(-half_mm, half_mm, n)
    gx, gy = np.meshgrid(g, g)
    return gx.ravel(), gy.ravel()


def worst_at_points(terms: np.ndarray) -> float:
    dx, dy = evaluate(terms, POINTS[:, 0], POINTS[:, 1])
    return float(np.hypot(dx, dy).max())


def noise_at_check_points(trials: int) -> None:
    print("1. noise carried to the check points (1 um per axis at the sites, no true overlay)")
    print(f"   {'sites':<28} {'unguarded median/p95 um':>24} {'guarded median/p95 um':>22}  "
          "models (unguarded -> guarded)   max leverage")
    cases = [("4 in a 10 mm square", 2, 5.0, False), ("3 x 3 over 100 mm", 3, 50.0, True),
             ("3 x 3 over 300 mm", 3, 150.0, True), ("4 x 4 over 420 mm", 4, 210.0, False),
             ("5 x 5 over 400 mm", 5, 200.0, True), ("7 x 7 over the panel", 7, 240.0, True)]
    for label, n, half, trapezoid in cases:
        x, y = layout(n, half)
        rng = np.random.default_rng(2026)
        bare, guarded, models, leverage = [], [], set(), 0.0
        for _ in range(trials):
            dx, dy = rng.normal(0.0, 1.0, x.size), rng.normal(0.0, 1.0, x.size)
            a = fit_measurement(x, y, dx, dy, trapezoid=trapezoid)
            b = fit_measurement(x, y, dx, dy, trapezoid=trapezoid, reach_mm=REACH)
            bare.append(worst_at_points(a.terms))
            guarded.append(worst_at_points(b.terms))
            models.add(f"{a.model} -> {b.model}")
            leverage = max(leverage, b.leverage)
        q = [np.percentile(v, [50, 95]) for v in (bare, guarded)]
        bare_q, guarded_q = f"{q[0][0]:.1f} / {q[0][1]:.1f}", f"{q[1][0]:.2f} / {q[1][1]:.2f}"
        print(f"   {label:<28} {bare_q:>24} {guarded_q:>22}  "
              f"{', '.join(sorted(models)):<30} {leverage:.2f}")


def l2l_calls(trials: int) -> None:
    print(f"2. L2L over a 12 um limit, 5 x 5 sites, 1.5 um noise, {trials} layers each")
    x, y = layout(5, 200.0)
    for true_um in (11.0, 13.5):
        rng = np.random.default_rng(7)
        bare = allowed = 0
        for _ in range(trials):
            dx = true_um + rng.normal(0.0, 1.5, x.size)
            dy = rng.normal(0.0, 1.5, x.size)
            fit = fit_measurement(x, y, dx, dy, reach_mm=REACH)
            face = interface_capture(side="A", layer=1, terms=fit.terms, sigma_um=fit.sigma_um,
                                     leverage=fit.leverage, points_mm=POINTS, vias=None)
            bare += face.worst_um > 12.0
            allowed += face.worst_um - SE_FACTOR * face.model_se_um > 12.0
        print(f"   true offset {true_um:4.1f} um: called over by the bare comparison "
              f"{bare / trials:.3f}, with two fit standard errors {allowed / trials:.3f}")


def capture_cost() -> None:
    rng = np.random.default_rng(3)
    x, y = layout(7, 240.0)
    dx, dy = rng.normal(0.0, 1.0, x.size), rng.normal(0.0, 1.3, x.size)
    fit = fit_measurement(x, y, dx, dy, reach_mm=REACH)
    vias = ViaGeometry(35.0, 65.0)
    terms = fit.terms + np.array([8.0, 3.0, 0, 0, 0, 0, 0, 0])

    faces = [(side, k) for side in ("A", "B") for k in range(1, 13)]

    def all_interfaces() -> None:
        capture_all(faces=faces, terms=np.tile(terms, (24, 1)),
                    sigma_um=np.tile(fit.sigma_um, (24, 1)), leverage=np.full(24, fit.leverage),
                    points_mm=POINTS, vias=vias)

    def one_fit() -> None:
        fit_measurement(x, y, dx, dy, reach_mm=REACH)

    def best(fn, calls: int) -> float:  # type: ignore[no-untyped-def]
        times = []
        for _ in range(5):
            start = time.perf_counter()
            for _ in range(calls):
                fn()
            times.append((time.perf_counter() - start) / calls)
        return min(times)

    t_capture, t_fit = best(all_interfaces, 50), best(one_fit, 500)
    print(f"3. 24 interfaces' capture figures: {t_capture * 1e3:.2f} ms; one fit_measurement "
          f"(49 sites): {t_fit * 1e6:.0f} us; ratio {t_capture / t_fit:.1f} x")


def post_share(posts: int) -> None:
    warnings.filterwarnings("ignore", message=".*httpx.*starlette.testclient.*")
    from fastapi.testclient import TestClient

    from app.main import create_app
    from app.services import keys, measurements, panel_estimate

    _data.PRODUCT["vias"] = {"via_diameter_um": 35.0, "pad_diameter_um": 65.0,
                             "copper_thickness_um": 15.0, "via_depth_um": 25.0}
    with _data.tempdir() as tmp, _data.sqlite_url(Path(tmp)) as url:
        db = _data.migrated(url)
        names = _data.serials(max(1, -(-posts // 10)) + 1, "VP")
        _data.register(db, names)
        key, _ = keys.create(db=db, role="uploader", label="bench tool")
        headers = {"Authorization": f"Bearer {key}"}
        client = TestClient(create_app(db), raise_server_exceptions=True)
        bodies = [_data.post_body(m) for m in sorted(
            _data.measurements(names, layers=5, seed=11, drift_share=0.2),
            key=lambda m: (m["layer"], m["panel"], m["side"]))][: posts + 4]
        for b in bodies[:4]:  # warm-up
            assert client.post("/api/v1/measurements", json=b, headers=headers).status_code == 201
        timer = _data.Timer()
        timer.wrap(panel_estimate, "capture_all")
        timer.wrap(measurements, "accept")
        try:
            start = time.perf_counter()
            for b in bodies[4:]:
                r = client.post("/api/v1/measurements", json=b, headers=headers)
                assert r.status_code == 201, r.text
            total = time.perf_counter() - start
        finally:
            timer.restore()
        n, spent = len(bodies) - 4, timer.seconds
        print(f"4. {n} POSTs: {1e3 * total / n:.1f} ms a post; capture_all "
              f"{1e3 * spent['capture_all'] / n:.2f} ms a post, "
              f"{spent['capture_all'] / total:.1%} of the POST "
              f"({spent['capture_all'] / spent['accept']:.1%} of measurements.accept)")
        db.close()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    parser.add_argument("--trials", type=int, default=2000)
    parser.add_argument("--posts", type=int, default=100)
    args = parser.parse_args()
    noise_at_check_points(args.trials)
    l2l_calls(args.trials)
    capture_cost()
    post_share(args.posts)


if __name__ == "__main__":
    main()
