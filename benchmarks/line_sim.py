"""A seeded simulated build-up line for the calibration benchmark (invented data, not the demo's).

Every panel has ``layers`` layers a side. The true terms of layer k, side S of a panel, in the
panel frame (TERM_NAMES order, raw units) are the sum of

- layer scatter: independent per layer and side (translation, scale, rotation);
- a constant per-panel, per-side offset that repeats every layer;
- a per-side random walk of that offset, layer by layer;
- on ``drift_share`` of the panels, a one-sided drift: ``drift_um`` (2-4 um) a layer on one side
  in one direction;
- on ``growth_share`` of the panels, a growing core scale: side A's scale terms grow by
  ``growth_ppm`` a layer every layer (layer k adds k * g), so the FTB scale accelerates;
- the exposure tool's bias, fixed in the tool's own frame (side B mirrored into the panel frame
  with ``app.overlay.frames.mirror_terms``); tool 0's translation bias drifts with time.

Lots of ``lot_size`` panels start one time step apart (``stagger``) and advance one layer pair
(A and B of the same layer) a step, so lots are at different layers at the same time. Half the
lots stay on one tool for every layer; the others draw a tool per layer and side.

A measurement is ``grid`` x ``grid`` sites over the central 90 % of the panel, displacement =
true model + ``site_noise_um`` per axis, reported in the tool frame. The truth that judges a
panel is its final FTB from the true terms at the product's check points (docs/conventions.md,
accumulation) against ``ftb_limit_um``.
"""

from __future__ import annotations

import argparse
from collections.abc import Iterator
from dataclasses import dataclass, field, replace

import numpy as np

from app.overlay.frames import mirror_sites, mirror_terms
from app.overlay.model import N_TERMS, evaluate
from app.overlay.stack import default_check_points

PPM = 1e-3  # um/mm per ppm (or urad)


@dataclass(frozen=True)
class LineConfig:
    """Process figures of the simulated line (defaults: the benchmark's line)."""

    layers: int = 12
    ftb_limit_um: float = 50.0
    l2l_limit_um: float = 12.0
    panel_width_mm: float = 510.0
    panel_height_mm: float = 515.0
    flip_axis: str = "y"
    lot_size: int = 25
    stagger: int = 1
    n_tools: int = 4
    grid: int = 4
    site_noise_um: float = 1.0
    layer_translation_um: float = 2.0
    layer_scale_ppm: float = 1.5
    layer_rotation_urad: float = 1.5
    offset_um: float = 0.6
    walk_um: float = 0.35
    drift_share: float = 0.06
    drift_um: tuple[float, float] = (2.0, 4.0)
    growth_share: float = 0.12
    growth_ppm: tuple[float, float] = (0.4, 1.0)
    tool_translation_um: float = 0.5
    tool_scale_ppm: float = 1.0
    tool_rotation_urad: float = 1.0
    tool_drift_um_per_step: float = 0.03
    kept_lot_share: float = 0.5


def add_line_options(ap: argparse.ArgumentParser) -> None:
    """The command-line options that change the line from its defaults (``line_config``)."""
    ap.add_argument("--drift-share", type=float, default=None)
    ap.add_argument("--growth-share", type=float, default=None)
    ap.add_argument("--drift-um", type=float, nargs=2, default=None, metavar=("LO", "HI"))
    ap.add_argument("--walk-um", type=float, default=None)
    ap.add_argument("--offset-um", type=float, default=None)


def line_config(args: argparse.Namespace) -> LineConfig:
    """``LineConfig`` with the options of ``add_line_options`` that were given."""
    changes = {name: getattr(args, name) for name in
               ("drift_share", "growth_share", "walk_um", "offset_um")
               if getattr(args, name) is not None}
    if args.drift_um is not None:
        changes["drift_um"] = tuple(args.drift_um)
    return replace(LineConfig(), **changes)


@dataclass
class Lot:
    """One simulated lot: its panels' true terms (panel frame) and tools."""

    code: str
    start_step: int
    serials: list[str]
    terms: np.ndarray  # (panels, 2 sides, layers, 8), panel frame, tool effects included
    tools: np.ndarray  # (layers, 2 sides) tool index
    kept: bool
    drifting: np.ndarray  # (panels,) bool
    growing: np.ndarray  # (panels,) bool
    measured: dict[str, np.ndarray] = field(default_factory=dict)
    # The random parts that are new at every layer (for the oracle bound of
    # calibration_oracle.py): layer scatter (panels, 2, layers, 8) and the random walk of the
    # offset (panels, 2, layers, 2), both included in ``terms``.
    scatter: np.ndarray | None = None
    walk: np.ndarray | None = None


class Line:
    """The seeded line: tools, lots, measurements by time step."""

    def __init__(self, config: LineConfig | None = None, *, seed: int = 2026) -> None:
        self.config = config or LineConfig()
        self.rng = np.random.default_rng(seed)
        c = self.config
        n = c.n_tools
        bias = np.zeros((n, N_TERMS))
        bias[:, :2] = self.rng.normal(0.0, c.tool_translation_um, (n, 2))
        bias[:, 2:4] = self.rng.normal(0.0, c.tool_scale_ppm, (n, 2)) * PPM
        rot = self.rng.normal(0.0, c.tool_rotation_urad, n) * PPM
        bias[:, 4] = rot
        bias[:, 5] = rot
        self.tool_bias = bias  # tool frame
        self.tool_names = [f"EXP{i + 1}" for i in range(n)]
        self.points = default_check_points(c.panel_width_mm, c.panel_height_mm)
        xs = np.linspace(-0.45, 0.45, c.grid) * c.panel_width_mm
        ys = np.linspace(-0.45, 0.45, c.grid) * c.panel_height_mm
        gx, gy = np.meshgrid(xs, ys)
        self.sites = (np.round(gx.ravel(), 3), np.round(gy.ravel(), 3))

    def tool_terms(self, tool: int, side: str, step: int) -> np.ndarray:
        """Tool bias at a time step, converted to the panel frame for ``side``."""
        b = self.tool_bias[tool].copy()
        if tool == 0:
            b[0] += self.config.tool_drift_um_per_step * step
        return mirror_terms(b, side=side, flip_axis=self.config.flip_axis)

    def new_lot(self, code: str, start_step: int, prefix: str) -> Lot:
        c, rng = self.config, self.rng
        n, big_l = c.lot_size, c.layers
        serials = [f"{prefix}{code}-{i + 1:02d}" for i in range(n)]
        kept = bool(rng.random() < c.kept_lot_share)
        if kept:
            tools = np.full((big_l, 2), int(rng.integers(c.n_tools)))
        else:
            tools = rng.integers(c.n_tools, size=(big_l, 2))
        t = np.zeros((n, 2, big_l, N_TERMS))
        t[..., :2] = rng.normal(0.0, c.layer_translation_um, (n, 2, big_l, 2))
        t[..., 2:4] = rng.normal(0.0, c.layer_scale_ppm, (n, 2, big_l, 2)) * PPM
        rot = rng.normal(0.0, c.layer_rotation_urad, (n, 2, big_l)) * PPM
        t[..., 4] = rot
        t[..., 5] = rot
        # Constant offset plus random walk of the per-layer offset, per side.
        offset = rng.normal(0.0, c.offset_um, (n, 2, 1, 2))
        walk = np.cumsum(rng.normal(0.0, c.walk_um, (n, 2, big_l, 2)), axis=2)
        scatter = t.copy()
        t[..., :2] += offset + walk
        drifting = rng.random(n) < c.drift_share
        for i in np.flatnonzero(drifting):
            side = int(rng.integers(2))
            angle = rng.uniform(0.0, 2.0 * np.pi)
            size = rng.uniform(*c.drift_um)
            t[i, side, :, 0] += size * np.cos(angle)
            t[i, side, :, 1] += size * np.sin(angle)
        growing = rng.random(n) < c.growth_share
        k = np.arange(1, big_l + 1)
        for i in np.flatnonzero(growing):
            g = rng.uniform(*c.growth_ppm) * PPM
            t[i, 0, :, 2] += g * k
            t[i, 0, :, 3] += g * k
        for layer in range(big_l):
            for s, side in enumerate(("A", "B")):
                t[:, s, layer] += self.tool_terms(int(tools[layer, s]), side,
                                                  start_step + layer)
        return Lot(code=code, start_step=start_step, serials=serials, terms=t, tools=tools,
                   kept=kept, drifting=drifting, growing=growing, scatter=scatter, walk=walk)

    def final_ftb_worst(self, lot: Lot) -> np.ndarray:
        """True final worst FTB length over the check points, per panel of the lot."""
        ftb = lot.terms[:, 0].sum(axis=1) - lot.terms[:, 1].sum(axis=1)
        dx, dy = evaluate(ftb, self.points[:, 0], self.points[:, 1])
        worst: np.ndarray = np.hypot(dx, dy).max(axis=1)
        return worst

    def measurements(self, lot: Lot, layer: int) -> Iterator[tuple[str, str, str, np.ndarray]]:
        """(serial, side, tool name, rows (sites, 4): x, y, dx, dy in the tool frame)."""
        c = self.config
        gx, gy = self.sites
        for i, serial in enumerate(lot.serials):
            for s, side in enumerate(("A", "B")):
                px, py, _, _ = mirror_sites(gx, gy, gx * 0, gy * 0, side=side,
                                            flip_axis=c.flip_axis)
                dx, dy = evaluate(lot.terms[i, s, layer - 1], px, py)
                dx = dx + self.rng.normal(0.0, c.site_noise_um, dx.shape)
                dy = dy + self.rng.normal(0.0, c.site_noise_um, dy.shape)
                x, y, dx, dy = mirror_sites(px, py, dx, dy, side=side, flip_axis=c.flip_axis)
                tool = self.tool_names[int(lot.tools[layer - 1, s])]
                yield serial, side, tool, np.column_stack([x, y, dx, dy])
