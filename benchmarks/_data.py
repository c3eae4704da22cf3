"""Shared, seeded test data and throwaway stores for benchmarks/ingest.py and benchmarks/holds.py.

Not a benchmark itself. Everything here goes through the app's own code (services, migrations)
except where a script says otherwise.
"""

from __future__ import annotations

import contextlib
import os
import resource
import tempfile
import time
import uuid
from collections.abc import Callable, Iterator
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd
from sqlalchemy import create_engine, text
from sqlalchemy.engine import make_url

from app.db import Database
from app.overlay.frames import mirror_sites
from app.overlay.model import evaluate
from app.schemas.panels import PanelCreate
from app.schemas.products import ProductCreate
from app.services import panels, products
from app.store.migrate import upgrade

PG_ADMIN_URL = "postgresql+psycopg://postgres@127.0.0.1:5432/postgres"
HEADER = ("panel", "layer", "side", "frame", "exposure_tool", "measured_at",
          "x_mm", "y_mm", "dx_um", "dy_um")
LAYERS = 12
SIDES = ("A", "B")
GRID = 7  # 7 x 7 sites a measurement by default; --sites 9 takes a 3 x 3 grid
SITES = GRID * GRID
ROWS_PER_PANEL = LAYERS * len(SIDES) * SITES  # 1176


def grid_for(sites: int) -> int:
    """The grid side for ``sites`` sites a measurement (a square number: 9, 49, ...)."""
    side = round(sites ** 0.5)
    if side * side != sites or side < 2:
        raise SystemExit(f"--sites must be a square grid of at least 4 sites, not {sites}")
    return side


def rows_per_panel(grid: int = GRID) -> int:
    return LAYERS * len(SIDES) * grid * grid
PRODUCT: dict[str, Any] = {
    "code": "BENCH12", "layers_per_side": LAYERS, "flip_axis": "y",
    "panel_width_mm": 510.0, "panel_height_mm": 515.0, "ftb_limit_um": 60.0,
    "l2l_limit_um": 12.0, "model_terms": 6,
}
T0 = datetime(2026, 11, 2, 6, 0, tzinfo=UTC)
PPM = 1e-3
TOOLS = ("EXP-1", "EXP-2", "EXP-3")


# ----------------------------------------------------------------------------- stores

def migrated(url: str) -> Database:
    db = Database(url)
    upgrade(db.engine)
    return db


@contextlib.contextmanager
def sqlite_url(tmp: Path, name: str = "store.db") -> Iterator[str]:
    yield f"sqlite:///{tmp / name}"


@contextlib.contextmanager
def pg_url(prefix: str = "stackledger_bench") -> Iterator[str]:
    """A throwaway PostgreSQL database, dropped WITH (FORCE) at the end."""
    name = f"{prefix}_{uuid.uuid4().hex[:10]}"
    admin = create_engine(PG_ADMIN_URL, isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.execute(text(f'CREATE DATABASE "{name}"'))
    try:
        yield make_url(PG_ADMIN_URL).set(database=name).render_as_string(hide_password=False)
    finally:
        with admin.connect() as conn:
            conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()


def pg_available() -> str | None:
    """None when PostgreSQL answers, else why not."""
    try:
        engine = create_engine(PG_ADMIN_URL)
        with engine.connect() as conn:
            conn.execute(text("SELECT 1"))
        engine.dispose()
    except Exception as exc:
        return f"{type(exc).__name__}: {str(exc).splitlines()[0]}"
    return None


def tempdir() -> tempfile.TemporaryDirectory[str]:
    return tempfile.TemporaryDirectory(prefix="stackledger_bench_")


# ----------------------------------------------------------------------------- registration

def serials(n: int, prefix: str = "BP", start: int = 1) -> list[str]:
    return [f"{prefix}{i:06d}" for i in range(start, start + n)]


def lot_of(serial: str, lot_size: int = 25) -> str:
    return f"L{(int(serial[-6:]) - 1) // lot_size + 1:05d}"


def register(db: Database, names: list[str], *, lot_size: int = 25) -> None:
    """The product (once) and the panels, through the services."""
    products.create(db=db, data=ProductCreate(**PRODUCT), actor="bench")
    for s in names:
        panels.create(db=db, data=PanelCreate(serial=s, product=PRODUCT["code"],
                                              lot=lot_of(s, lot_size)), actor="bench")


# ----------------------------------------------------------------------------- site data

def site_grid(n: int = GRID, fraction: float = 0.9) -> tuple[np.ndarray, np.ndarray]:
    """n x n sites over the central ``fraction`` of the panel, mm about the centre."""
    xs = np.linspace(-0.5, 0.5, n) * fraction * PRODUCT["panel_width_mm"]
    ys = np.linspace(-0.5, 0.5, n) * fraction * PRODUCT["panel_height_mm"]
    gx, gy = np.meshgrid(xs, ys)
    return np.round(gx.ravel(), 4), np.round(gy.ravel(), 4)


def _random_terms(rng: np.random.Generator, n: int) -> np.ndarray:
    """Layer terms as the demo simulator draws them: 2 um, 3 ppm, 3 urad rotation, 1 urad skew."""
    t = np.zeros((n, 8))
    t[:, :2] = rng.normal(0.0, 2.0, (n, 2))
    t[:, 2:4] = rng.normal(0.0, 3.0, (n, 2)) * PPM
    rot, skew = rng.normal(0.0, 3.0, n), rng.normal(0.0, 1.0, n)
    t[:, 4] = (rot - skew / 2) * PPM
    t[:, 5] = (rot + skew / 2) * PPM
    return t


def panel_drifts(rng: np.random.Generator, n_panels: int, share: float,
                 um_per_layer: tuple[float, float] = (3.0, 5.5)) -> np.ndarray:
    """(n_panels, 2) per-layer drift in the panel frame; most panels 0, ``share`` drifting."""
    drift = np.zeros((n_panels, 2))
    moving = rng.random(n_panels) < share
    mag = rng.uniform(*um_per_layer, moving.sum())
    ang = np.deg2rad(rng.uniform(-25, 25, moving.sum()))
    drift[moving] = np.c_[mag * np.cos(ang), mag * np.sin(ang)]
    return drift


def measurements(names: list[str], *, layers: int = LAYERS, seed: int = 2026,
                 drift_share: float = 0.05, grid: int = GRID) -> Iterator[dict[str, Any]]:
    """Measurements in posting order (panel, then layer, A before B), sites in the tool frame.

    Yields dicts with panel, layer, side, frame, tool, measured_at (aware), x, y, dx, dy arrays.
    """
    rng = np.random.default_rng(seed)
    gx, gy = site_grid(grid)
    n_sites = grid * grid
    drifts = panel_drifts(rng, len(names), drift_share)
    for p, serial in enumerate(names):
        terms = _random_terms(rng, layers * 2)
        for k in range(1, layers + 1):
            for si, side in enumerate(SIDES):
                t = terms[(k - 1) * 2 + si].copy()
                t[:2] += (1.0 if side == "A" else -1.0) * drifts[p]
                # Sites in the panel frame -> displacement -> tool frame (side B mirrored).
                px, py, _, _ = mirror_sites(gx, gy, gx * 0, gy * 0, side=side, flip_axis="y")
                dx, dy = evaluate(t, px, py)
                dx = dx + rng.normal(0.0, 1.5, n_sites)
                dy = dy + rng.normal(0.0, 1.5, n_sites)
                x, y, dx, dy = mirror_sites(px, py, dx, dy, side=side, flip_axis="y")
                yield {
                    "panel": serial, "layer": k, "side": side, "frame": "facing_side",
                    "exposure_tool": TOOLS[(p // 25 + k) % len(TOOLS)],
                    "measured_at": T0 + timedelta(days=2 * k, minutes=1.5 * p,
                                                  hours=8 if side == "B" else 0),
                    "x": x, "y": y, "dx": np.round(dx, 4), "dy": np.round(dy, 4),
                }


def write_csv(path: Path, names: list[str], *, layers: int = LAYERS, seed: int = 2026,
              drift_share: float = 0.05, grid: int = GRID) -> int:
    """Write the import CSV; returns the number of site rows."""
    return write_measurements(path, list(measurements(
        names, layers=layers, seed=seed, drift_share=drift_share, grid=grid)))


def write_measurements(path: Path, ms: list[dict[str, Any]]) -> int:
    """Write measurements (as ``measurements`` yields them) as an import CSV; returns the rows."""
    counts = [len(m["x"]) for m in ms]
    rep = lambda key: np.repeat(np.array([m[key] for m in ms], dtype=object), counts)  # noqa: E731
    frame = pd.DataFrame({
        "panel": rep("panel"), "layer": np.repeat([m["layer"] for m in ms], counts),
        "side": rep("side"), "frame": rep("frame"), "exposure_tool": rep("exposure_tool"),
        "measured_at": np.repeat([m["measured_at"].isoformat() for m in ms], counts),
        "x_mm": np.concatenate([m["x"] for m in ms]),
        "y_mm": np.concatenate([m["y"] for m in ms]),
        "dx_um": np.concatenate([m["dx"] for m in ms]),
        "dy_um": np.concatenate([m["dy"] for m in ms]),
    })
    frame.to_csv(path, index=False, header=list(HEADER), float_format="%.4f")
    return sum(counts)


def post_body(m: dict[str, Any]) -> dict[str, Any]:
    """A measurement as the JSON body of POST /api/v1/measurements."""
    return {
        "panel": m["panel"], "layer": m["layer"], "side": m["side"], "frame": m["frame"],
        "exposure_tool": m["exposure_tool"], "measured_at": m["measured_at"].isoformat(),
        "sites": [{"x_mm": float(a), "y_mm": float(b), "dx_um": float(c), "dy_um": float(d)}
                  for a, b, c, d in zip(m["x"], m["y"], m["dx"], m["dy"], strict=True)],
    }


# ----------------------------------------------------------------------------- measuring

def _status_mb(field: str) -> float | None:
    """A memory field of /proc/self/status in MB, None where there is none."""
    try:
        with open("/proc/self/status", encoding="ascii") as f:
            for line in f:
                if line.startswith(f"{field}:"):
                    return int(line.split()[1]) / 1024
    except OSError:
        pass
    return None


def rss_mb() -> float:
    """Resident set of this process now, MB (VmRSS; 0 where /proc is missing)."""
    return _status_mb("VmRSS") or 0.0


def peak_rss_mb() -> float:
    """Peak resident set of this process so far, MB.

    VmHWM from /proc/self/status where there is one: unlike ru_maxrss, which Linux carries over
    fork and exec (a spawned child would report its parent's peak), it starts afresh at exec.
    """
    peak = _status_mb("VmHWM")
    return peak if peak is not None else resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


class Timer:
    """Accumulates the time spent in wrapped callables: ``timer.wrap(module, 'name')``."""

    def __init__(self) -> None:
        self.seconds: dict[str, float] = {}
        self.calls: dict[str, int] = {}
        #: Labels of wrapped calls in progress (a hook can ask whether it runs inside one).
        self.active: set[str] = set()
        self._undo: list[tuple[Any, str, Any]] = []

    def add(self, label: str, seconds: float) -> None:
        self.seconds[label] = self.seconds.get(label, 0.0) + seconds
        self.calls[label] = self.calls.get(label, 0) + 1

    def wrap(self, owner: Any, name: str, label: str | None = None, *,
             label_of: Callable[..., str] | None = None) -> None:
        """Time ``owner.name`` under ``label`` (or ``label_of(*args, **kwargs)``, per call);
        skipped when the app no longer has it (the code moves on)."""
        original = getattr(owner, name, None)
        if original is None:
            return
        fixed = label or name

        def timed(*args: Any, **kwargs: Any) -> Any:
            this = label_of(*args, **kwargs) if label_of else fixed
            self.active.add(this)
            t = time.perf_counter()
            try:
                return original(*args, **kwargs)
            finally:
                self.add(this, time.perf_counter() - t)
                self.active.discard(this)

        setattr(owner, name, timed)
        self._undo.append((owner, name, original))

    def restore(self) -> None:
        for owner, name, original in reversed(self._undo):
            setattr(owner, name, original)
        self._undo.clear()


def machine() -> str:
    """Cores and load, printed with the figures: the machine is shared, and other jobs' load
    changes what one run measures."""
    one, five, fifteen = os.getloadavg()
    return (f"{os.cpu_count()} cores, load average {one:.1f} / {five:.1f} / {fifteen:.1f} "
            "(1 / 5 / 15 min)")


def fmt_rate(rows: int, seconds: float) -> str:
    return f"{rows / seconds:,.0f} rows/s"
