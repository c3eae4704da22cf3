"""Seeded demo scenario: an invented substrate fab part-way through a 12 + 12 build-up stack.

Everything here is fiction made for the demo: the fab, its products, lots, serials and tools.
300 panels in 8 lots of 2 products have reached layer 2..12 on side A (side B at the same layer
or one behind). Three exposure tools run the lots. The story the hold list should tell:

- EXP-2 carries a translation bias that grows with calendar time in its own tool frame. Both
  sides' tools show it the same way in their own frames, so through the side-B mirror it adds up
  front to back (docs/conventions.md, "Accumulation") on the panels that run both sides there.
- A few panels drift one way, layer after layer: +d in the panel frame on side A and -d on
  side B, so front-to-back grows by 2d a layer pair while each layer passes its L2L check.
- A few panels have an organic core that keeps growing: each layer shows more scale than the
  one beneath, side A more than side B.
- A few panels are over a limit already: a fast drift past the FTB limit, or one layer whose
  registration jumped beyond the L2L limit.

Each layer's overlay is a term vector in the panel frame (``app.overlay.model`` order), evaluated
at the sites with per-site noise, then posted in the lot's upload frame: side A in "facing_side"
(= panel), side B facing side B via ``frames.mirror_sites`` (lot L26-4804 posts side B
in "panel" frame to exercise that column). Pure: numpy and the standard library only.
"""

from __future__ import annotations

import csv
import json
import textwrap
from collections.abc import Iterator
from dataclasses import dataclass, field
from datetime import datetime, timedelta, timezone
from pathlib import Path
from typing import Any, Final

import numpy as np

from app.overlay.frames import mirror_sites, mirror_terms
from app.overlay.model import FloatArray, evaluate

FAB_NAME: Final = "Tarnwick Substrate Works"
FAB_TIME_ZONE: Final = timezone(timedelta(hours=8))
LAYERS_PER_SIDE: Final = 12
SIDES: Final = ("A", "B")
TOOLS: Final = ("EXP-1", "EXP-2", "EXP-3")
BIASED_TOOL: Final = "EXP-2"
#: EXP-2's translation bias (Tx, Ty) in its own tool frame grows linearly from the onset.
BIAS_ONSET: Final = datetime(2026, 11, 2, tzinfo=FAB_TIME_ZONE)
BIAS_RATE_UM_PER_DAY: Final = (0.06, 0.06)
#: Panels whose FTB today holds at least this much of EXP-2's bias are listed as biased-tool.
BIAS_LISTING_UM: Final = 10.0

PPM: Final = 1e-3  # 1 ppm of scale (or 1 urad of rotation) = 1e-3 um/mm
TRANSLATION_SIGMA_UM: Final = 2.0
SCALE_SIGMA_PPM: Final = 3.0
ROTATION_SIGMA_URAD: Final = 3.0
SKEW_SIGMA_URAD: Final = 1.0  # non-orthogonality Oy - Ox
SITE_NOISE_SIGMA_UM: Final = 1.5
#: Product with 8 terms: a trapezoid (um/mm^2) grows over the outer layers to this at layer 12.
TRAPEZOID_FROM_LAYER: Final = 7
TRAPEZOID_AT_TOP: Final = (2.0e-5, 1.0e-5)
#: Layers stay in control: a random draw that takes a layer (story and bias included) beyond this
#: share of the L2L limit at the check points is drawn again; only excursions go beyond.
IN_CONTROL_SHARE: Final = 0.8
#: The app's default check points: a 5 x 5 grid over the central 90 % of the 510 x 515 mm panel.
CHECK_X_MM, CHECK_Y_MM = (
    a.ravel() for a in np.meshgrid(np.linspace(-229.5, 229.5, 5), np.linspace(-231.75, 231.75, 5))
)

LAYER_PAIR_DAYS: Final = 2.0  # one layer on both sides every two days
SIDE_B_DELAY: Final = timedelta(hours=8)
METROLOGY_STEP: Final = timedelta(seconds=90)  # one panel's measurement after the other
HOME_TOOL_SHARE: Final = 0.85  # a lot's layer runs on its home tool, else on another
PANEL_REROUTE_SHARE: Final = 0.05  # single panels of that layer sent to another tool
BEHIND_LEAD: Final = ((0, 0.65), (1, 0.22), (2, 0.13))  # (layers behind the lot's lead, share)

# The story's panels: drift in um a layer in the panel frame (+ on side A, - on side B).
FAST_DRIFT_UM: Final = (5.0, 6.0)  # already beyond the FTB limit
DRIFT_UM: Final = (3.0, 5.0)  # heading out of limit
SLOW_DRIFT_UM: Final = (0.9, 1.2)  # worth watching
EXCURSION_UM: Final = (18.0, 20.0)  # one layer's registration jump, beyond the L2L limit
CORE_GROWTH_PPM: Final = {"A": 3.0, "B": 0.5}  # layer k shows k times this much scale
INTENDED_LEVEL: Final = {
    "over_limit": "over_limit",
    "drifting": "at_risk (watch while few layers show it)",
    "growing_core": "watch / at_risk",
    "slow_drifting": "watch",
}


@dataclass(frozen=True)
class ProductSpec:
    """A product as ``products.json`` describes it, plus the metrology site grid used here."""

    code: str
    name: str
    flip_axis: str
    ftb_limit_um: float
    l2l_limit_um: float
    model_terms: int
    site_grid: tuple[int, float]  # sites per axis, pitch in mm
    vias: dict[str, Any] | None = None

    def to_json(self) -> dict[str, Any]:
        record: dict[str, Any] = {
            "code": self.code,
            "name": self.name,
            "layers_per_side": LAYERS_PER_SIDE,
            "flip_axis": self.flip_axis,
            "panel_width_mm": 510,
            "panel_height_mm": 515,
            "ftb_limit_um": self.ftb_limit_um,
            "l2l_limit_um": self.l2l_limit_um,
            "model_terms": self.model_terms,
            "p_watch": 0.05,
            "p_at_risk": 0.50,
        }
        if self.vias is not None:
            record["vias"] = dict(self.vias)
        return record


# C75's vias: 35 um vias on 65 um pads, a capture margin of 15 um, above the 12 um L2L limit so
# that an in-control layer (worst offset at most 0.8 x 12 um, 1.5 um site noise) misses with a
# probability of a few in a thousand at worst, while a registration jump of 18-20 um runs off
# its pads. Layer 1 lands on the core's larger capture pads (50 um vias on 90 um pads). The
# stacked-via figure uses 15 um pad copper and 25 um deep vias (invented, plausible).
PRODUCTS: Final = (
    ProductSpec("C55", "Carrier 55, 12+12 build-up", "y", 55.0, 12.0, 6, (4, 140.0)),
    ProductSpec(
        "C75",
        "Carrier 75, 12+12 build-up, fine line",
        "x",
        60.0,
        12.0,
        8,
        (5, 100.0),
        {
            "via_diameter_um": 35.0,
            "pad_diameter_um": 65.0,
            "layers": [{"layer": 1, "via_diameter_um": 50.0, "pad_diameter_um": 90.0}],
            "copper_thickness_um": 15.0,
            "via_depth_um": 25.0,
        },
    ),
)


@dataclass(frozen=True)
class LotPlan:
    """A lot: product, size, lead layer (reached by most of its panels) and when that ran."""

    code: str
    product: str
    panels: int
    lead_layer: int
    lead_exposed: datetime  # side A of the lead layer; layer j ran (lead - j) pairs earlier
    home_tool: str
    side_b_frame: str = "facing_side"


def _fab_time(day: int, hour: int) -> datetime:
    return datetime(2026, 11, day, hour, tzinfo=FAB_TIME_ZONE)


LOTS: Final = (
    LotPlan("L26-4801", "C55", 38, 12, _fab_time(29, 9), "EXP-1"),
    LotPlan("L26-4802", "C75", 37, 11, _fab_time(28, 13), "EXP-3"),
    LotPlan("L26-4803", "C55", 38, 9, _fab_time(29, 15), "EXP-2"),
    LotPlan("L26-4804", "C75", 37, 7, _fab_time(27, 10), "EXP-1", side_b_frame="panel"),
    LotPlan("L26-4805", "C55", 37, 8, _fab_time(28, 8), "EXP-3"),
    LotPlan("L26-4806", "C75", 38, 10, _fab_time(30, 7), "EXP-2"),
    LotPlan("L26-4807", "C55", 37, 4, _fab_time(29, 11), "EXP-1"),
    LotPlan("L26-4808", "C75", 38, 3, _fab_time(30, 9), "EXP-3"),
)
MEASUREMENT_COLUMNS: Final = (
    *("panel", "layer", "side", "frame", "exposure_tool", "measured_at"),
    *("x_mm", "y_mm", "dx_um", "dy_um"),
)


@dataclass(frozen=True)
class ScenarioSummary:
    """What ``generate`` wrote, and the serials of the panels made risky on purpose, per kind."""

    fab: str
    products: int
    lots: int
    panels: int
    tools: int
    complete_panels: int
    measurements: int
    rows: int
    drifting: tuple[str, ...]  # 3-5 um a layer one way: heading out of limit (at_risk or watch)
    slow_drifting: tuple[str, ...]  # about 1 um a layer one way (watch)
    biased_tool: tuple[str, ...]  # at least BIAS_LISTING_UM of EXP-2's bias in today's FTB
    growing_core: tuple[str, ...]  # scale grows layer by layer, side A faster than B
    over_limit: tuple[str, ...]  # FTB already beyond the limit, or one layer beyond L2L


@dataclass
class _Panel:
    serial: str
    product: ProductSpec
    lot: LotPlan
    index: int  # place in the lot's metrology queue
    reached: dict[str, int]  # side -> outermost layer measured
    tools: dict[tuple[str, int], str] = field(default_factory=dict)
    drift_um: tuple[float, float] = (0.0, 0.0)  # a layer on side A (panel frame); B opposite
    core_growth_ppm: dict[str, float] = field(default_factory=lambda: {"A": 0.0, "B": 0.0})
    excursion: tuple[str, int, float, float] | None = None  # side, layer, Tx, Ty in um
    note: str = ""
    ftb_now_um: float = 0.0  # worst over the check points, from the true terms (no site noise)
    worst_l2l_um: float = 0.0
    bias_in_ftb_um: float = 0.0


@dataclass(frozen=True)
class _Measurement:
    measured_at: datetime
    panel: str
    layer: int
    side: str
    frame: str
    tool: str
    sites: tuple[FloatArray, FloatArray, FloatArray, FloatArray]  # x, y, dx, dy as posted


def _measured_at(panel: _Panel, side: str, layer: int) -> datetime:
    lot = panel.lot
    start = lot.lead_exposed - timedelta(days=LAYER_PAIR_DAYS * (lot.lead_layer - layer))
    return start + (SIDE_B_DELAY if side == "B" else timedelta()) + METROLOGY_STEP * panel.index


def _tool_bias(when: datetime) -> FloatArray:
    """EXP-2's bias as a term vector in its own tool frame at ``when``."""
    days = max((when - BIAS_ONSET).total_seconds() / 86400.0, 0.0)
    terms = np.zeros(8)
    terms[:2] = np.array(BIAS_RATE_UM_PER_DAY) * days
    return terms


def _site_grid(product: ProductSpec) -> tuple[FloatArray, FloatArray]:
    """Sites in raster order (top row first, left to right) as the tool sees them, in mm."""
    n, pitch = product.site_grid
    axis = (np.arange(n) - (n - 1) / 2.0) * pitch
    y, x = np.meshgrid(axis[::-1], axis, indexing="ij")
    return x.ravel(), y.ravel()


def _overlay_at_check_points(terms: FloatArray) -> float:
    return float(np.hypot(*evaluate(terms, CHECK_X_MM, CHECK_Y_MM)).max())


def _build_panels(rng: np.random.Generator) -> list[_Panel]:
    products = {p.code: p for p in PRODUCTS}
    behind = np.array([b for b, _ in BEHIND_LEAD])
    shares = np.array([s for _, s in BEHIND_LEAD])
    panels = []
    for lot in LOTS:
        for i in range(lot.panels):
            layer_a = max(int(lot.lead_layer - rng.choice(behind, p=shares)), 2)
            reached = {"A": layer_a, "B": layer_a - int(rng.random() < 0.5)}
            serial = f"{lot.code}-{i + 1:03d}"
            panels.append(_Panel(serial, products[lot.product], lot, i, reached))
    return panels


def _assign_tools(rng: np.random.Generator, panels: list[_Panel]) -> None:
    for lot in LOTS:
        others = [t for t in TOOLS if t != lot.home_tool]
        main = {}
        for layer in range(1, LAYERS_PER_SIDE + 1):
            for side in SIDES:
                at_home = rng.random() < HOME_TOOL_SHARE
                main[side, layer] = lot.home_tool if at_home else str(rng.choice(others))
        for panel in (p for p in panels if p.lot is lot):
            for (side, layer), tool in main.items():
                if rng.random() < PANEL_REROUTE_SHARE:
                    tool = str(rng.choice([t for t in TOOLS if t != tool]))
                panel.tools[side, layer] = tool


def _pick(
    rng: np.random.Generator, panels: list[_Panel], taken: set[str], per_product: int,
    layers_a: tuple[int, int],
) -> list[_Panel]:  # fmt: skip
    """Draw ``per_product`` untaken panels of each product, off the biased tool's lots, whose
    side A has reached a layer in ``layers_a`` (inclusive)."""
    picked = []
    for product in PRODUCTS:
        pool = [
            p for p in panels
            if p.serial not in taken and p.product is product and p.lot.home_tool != BIASED_TOOL
            and layers_a[0] <= p.reached["A"] <= layers_a[1] and p.reached["B"] >= 2
        ]  # fmt: skip
        picked += [pool[i] for i in sorted(rng.choice(len(pool), per_product, replace=False))]
    taken.update(p.serial for p in picked)
    return picked


def _drift(rng: np.random.Generator, magnitude_um: float) -> tuple[float, float]:
    angle = np.deg2rad(rng.uniform(-25.0, 25.0))  # mostly +x in the panel frame
    return magnitude_um * float(np.cos(angle)), magnitude_um * float(np.sin(angle))


def _assign_stories(rng: np.random.Generator, panels: list[_Panel]) -> dict[str, list[_Panel]]:
    taken: set[str] = set()
    over_ftb = _pick(rng, panels, taken, 1, (7, 9))
    for p in over_ftb:
        p.drift_um = _drift(rng, rng.uniform(*FAST_DRIFT_UM))
        p.note = f"drifts {np.hypot(*p.drift_um):.1f} um a layer; FTB beyond the limit"
    over_l2l = _pick(rng, panels, taken, 1, (3, 10))
    for p in over_l2l:
        side = SIDES[int(rng.random() < 0.5)]
        jump, angle = rng.uniform(*EXCURSION_UM), rng.uniform(0.0, 2.0 * np.pi)
        p.excursion = (side, p.reached[side], jump * np.cos(angle), jump * np.sin(angle))
        p.note = f"layer {p.reached[side]} side {side} registered {jump:.1f} um off (L2L)"
    drifting = _pick(rng, panels, taken, 3, (3, 5))
    for p in drifting:
        # Keep today's FTB under 70 % of the limit; at 12/12 it lands far beyond it.
        ceiling = 0.7 * p.product.ftb_limit_um / (p.reached["A"] + p.reached["B"])
        p.drift_um = _drift(rng, min(rng.uniform(*DRIFT_UM), ceiling))
        p.note = f"drifts {np.hypot(*p.drift_um):.1f} um a layer"
    growing = _pick(rng, panels, taken, 2, (6, 8))
    for p in growing:
        p.core_growth_ppm = dict(CORE_GROWTH_PPM)
        p.note = "layer k scale +{A}k ppm on A, +{B}k ppm on B".format(**CORE_GROWTH_PPM)
    slow = _pick(rng, panels, taken, 3, (5, 9))
    for p in slow:
        p.drift_um = _drift(rng, rng.uniform(*SLOW_DRIFT_UM))
        p.note = f"drifts {np.hypot(*p.drift_um):.1f} um a layer"
    return {
        "over_limit": over_ftb + over_l2l,
        "drifting": drifting,
        "growing_core": growing,
        "slow_drifting": slow,
    }


def _random_terms(rng: np.random.Generator, panel: _Panel, layer: int) -> FloatArray:
    terms = np.zeros(8)
    terms[:2] = rng.normal(0.0, TRANSLATION_SIGMA_UM, 2)
    terms[2:4] = rng.normal(0.0, SCALE_SIGMA_PPM, 2) * PPM
    rotation, skew = rng.normal(0.0, ROTATION_SIGMA_URAD), rng.normal(0.0, SKEW_SIGMA_URAD)
    terms[4:6] = np.array([rotation - skew / 2.0, rotation + skew / 2.0]) * PPM  # Ox, Oy
    if panel.product.model_terms == 8 and layer >= TRAPEZOID_FROM_LAYER:
        share = (layer - TRAPEZOID_FROM_LAYER + 1) / (LAYERS_PER_SIDE - TRAPEZOID_FROM_LAYER + 1)
        terms[6:8] = np.array(TRAPEZOID_AT_TOP) * share + rng.normal(0.0, 3e-6, 2)
    return terms


def _layer_terms(
    rng: np.random.Generator, panel: _Panel, side: str, layer: int, bias: FloatArray
) -> FloatArray:
    """The layer's overlay terms in the panel frame: story, tool ``bias`` and a random part."""
    story = bias.copy()
    story[:2] += (1.0 if side == "A" else -1.0) * np.array(panel.drift_um)
    story[2:4] += panel.core_growth_ppm[side] * layer * PPM
    if panel.excursion is not None and panel.excursion[:2] == (side, layer):
        story[:2] += np.array(panel.excursion[2:])
        return story + _random_terms(rng, panel, layer)
    in_control = IN_CONTROL_SHARE * panel.product.l2l_limit_um
    for _ in range(100):  # the story alone stays well inside, so this ends in a few draws
        terms = story + _random_terms(rng, panel, layer)
        if _overlay_at_check_points(terms) <= in_control:
            break
    return terms


def _simulate(rng: np.random.Generator, panels: list[_Panel]) -> list[_Measurement]:
    """All measurements, sorted as posted; fills each panel's true FTB, L2L and bias share."""
    measurements = []
    for panel in panels:
        flip = panel.product.flip_axis
        x_tool, y_tool = _site_grid(panel.product)
        stack = {side: np.zeros(8) for side in SIDES}  # sum of the layers' terms, panel frame
        bias_stack = {side: np.zeros(8) for side in SIDES}
        for side in SIDES:
            zero = np.zeros_like(x_tool)
            x, y, _, _ = mirror_sites(x_tool, y_tool, zero, zero, side=side, flip_axis=flip)
            for layer in range(1, panel.reached[side] + 1):
                when = _measured_at(panel, side, layer)
                tool = panel.tools[side, layer]
                bias = np.zeros(8)
                if tool == BIASED_TOOL:
                    bias = mirror_terms(_tool_bias(when), side=side, flip_axis=flip)
                terms = _layer_terms(rng, panel, side, layer, bias)
                stack[side] += terms
                bias_stack[side] += bias
                l2l = _overlay_at_check_points(terms)
                panel.worst_l2l_um = max(panel.worst_l2l_um, l2l)
                dx, dy = evaluate(terms, x, y)
                dx = dx + rng.normal(0.0, SITE_NOISE_SIGMA_UM, dx.shape)
                dy = dy + rng.normal(0.0, SITE_NOISE_SIGMA_UM, dy.shape)
                frame = panel.lot.side_b_frame if side == "B" else "facing_side"
                sites = (x, y, dx, dy)
                if frame == "facing_side":
                    sites = mirror_sites(x, y, dx, dy, side=side, flip_axis=flip)
                measurements.append(
                    _Measurement(when, panel.serial, layer, side, frame, tool, sites)
                )
        # FTB(p) = P_A(p) - P_B(p) (conventions.md, "Accumulation"); the bias is a pure translation.
        panel.ftb_now_um = _overlay_at_check_points(stack["A"] - stack["B"])
        panel.bias_in_ftb_um = float(np.hypot(*(bias_stack["A"] - bias_stack["B"])[:2]))
    measurements.sort(key=lambda m: (m.measured_at, m.panel, m.layer, m.side))
    return measurements


def _number(value: float) -> str:
    """Up to four decimals, no trailing zeros, no negative zero."""
    text = f"{value:.4f}".rstrip("0").rstrip(".")
    return "0" if text in ("-0", "") else text


def _measurement_rows(measurements: list[_Measurement]) -> Iterator[tuple[object, ...]]:
    for m in measurements:
        stamp = m.measured_at.isoformat()
        for x, y, dx, dy in zip(*m.sites, strict=True):
            numbers = (_number(v) for v in (x, y, dx, dy))
            yield (m.panel, m.layer, m.side, m.frame, m.tool, stamp, *numbers)


def _write_csv(path: Path, header: tuple[str, ...], rows: Any) -> None:
    with path.open("w", newline="", encoding="utf-8") as handle:
        writer = csv.writer(handle, lineterminator="\n")
        writer.writerow(header)
        writer.writerows(rows)


def _readme(
    summary: ScenarioSummary, seed: int, span: tuple[str, str], story: dict[str, list[_Panel]]
) -> str:
    table = [
        f"| {p.serial} | {p.product.code} | A {p.reached['A']} / B {p.reached['B']} | {kind} | "
        f"{p.note} | {p.ftb_now_um:.1f} | {p.worst_l2l_um:.1f} | {INTENDED_LEVEL[kind]} |"
        for kind in INTENDED_LEVEL
        for p in story[kind]
    ]
    biased = textwrap.fill(", ".join(summary.biased_tool), width=96)
    rate, onset = BIAS_RATE_UM_PER_DAY[0], BIAS_ONSET.date().isoformat()
    return f"""\
# Demo scenario: {summary.fab}

Invented data for stackledger's demo, written by `app/demo/simulator.py` (seed {seed}). Do not
edit by hand; regenerate with `python -m app.demo.simulator` (same seed, same bytes;
`tests/demo/test_simulator.py` fails when these files go stale). The fab, its products, lots,
serials and exposure tools are fiction.

## Files

- `products.json`: {summary.products} products, 12 + 12 build-up layers, 510 x 515 mm panels,
  L2L limit 12 um, default check points (5 x 5 over the central 90 %).
  - C55: flip about y, 6 terms, 4 x 4 sites at 140 mm pitch, FTB limit 55 um.
  - C75: flip about x, 8 terms, 5 x 5 sites at 100 mm pitch, FTB limit 60 um, and via
    settings: 35 um vias on 65 um pads (capture margin 15 um; layer 1: 50 on 90 um, margin
    20 um), 15 um pad copper, 25 um deep vias. C55 has none: its L2L limit judges each layer.
- `panels.csv`: {summary.panels} panels in {summary.lots} lots; serial = lot + index.
- `measurements.csv`: {summary.rows} rows (one per site), {summary.measurements} measurements,
  each a contiguous block of one panel/layer/side, sorted by `measured_at`, from
  {span[0]} to {span[1]}.
  Side A in frame `facing_side` (= panel); side B in frame `facing_side` (as the tools
  see it), except lot L26-4804, whose side B is posted in frame `panel`. Side A has
  reached layer 2..12, side B the same layer or one behind; {summary.complete_panels} panels
  are complete (A 12 / B 12).

## The story

Normal layers: translation sigma {TRANSLATION_SIGMA_UM} um, scale {SCALE_SIGMA_PPM} ppm, rotation \
{ROTATION_SIGMA_URAD} urad, site noise {SITE_NOISE_SIGMA_UM} um,
kept within {IN_CONTROL_SHARE:.0%} of the L2L limit; C75 grows a small trapezoid from layer \
{TRAPEZOID_FROM_LAYER}. Most panels are clear.

Exposure-tool bias: {BIASED_TOOL} drifts {rate} um/day in x and in y of its own (facing-side)
frame since {onset}.
Lots L26-4803 (C55) and L26-4806 (C75) run both sides there, so the bias adds up front to back:
along x on C55 (flip y), along y on C75 (flip x); the other axis cancels. Panels with at least
{BIAS_LISTING_UM:.0f} um of it in today's FTB (clear to at_risk, depending on their own scatter):

{biased}

Panels made risky on purpose (drift: +d a layer on side A, -d on side B, panel frame). Current
FTB and worst L2L are the worst over the check points, in um, from the simulated terms before
site noise; the app's fitted figures differ by a little.

| panel | product | layers reached | scenario | what | current FTB | worst L2L | intended level |
|---|---|---|---|---|---|---|---|
{chr(10).join(table)}

The intended level is the story, not the app's output: the forecast decides. A few normal
panels whose random walk happens to look like a trend (most often early in the stack, with
little history of their own) may reach watch or at_risk too.
"""


def generate(out_dir: Path, *, seed: int = 2026) -> ScenarioSummary:
    """Write products.json, panels.csv, measurements.csv and README.md into ``out_dir``.

    Deterministic: the same seed gives byte-identical files.
    """
    out_dir = Path(out_dir)
    out_dir.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    panels = _build_panels(rng)
    _assign_tools(rng, panels)
    story = _assign_stories(rng, panels)
    measurements = _simulate(rng, panels)

    def serials(kind: str) -> tuple[str, ...]:
        return tuple(sorted(p.serial for p in story[kind]))

    summary = ScenarioSummary(
        fab=FAB_NAME,
        products=len(PRODUCTS),
        lots=len(LOTS),
        panels=len(panels),
        tools=len({m.tool for m in measurements}),
        complete_panels=sum(p.reached == {"A": 12, "B": 12} for p in panels),
        measurements=len(measurements),
        rows=sum(len(m.sites[0]) for m in measurements),
        drifting=serials("drifting"),
        slow_drifting=serials("slow_drifting"),
        biased_tool=tuple(p.serial for p in panels if p.bias_in_ftb_um >= BIAS_LISTING_UM),
        growing_core=serials("growing_core"),
        over_limit=serials("over_limit"),
    )
    products = json.dumps([p.to_json() for p in PRODUCTS], indent=2)
    (out_dir / "products.json").write_text(products + "\n", encoding="utf-8")
    panel_rows = ((p.serial, p.product.code, p.lot.code) for p in panels)
    _write_csv(out_dir / "panels.csv", ("serial", "product", "lot"), panel_rows)
    _write_csv(out_dir / "measurements.csv", MEASUREMENT_COLUMNS, _measurement_rows(measurements))
    span = (measurements[0].measured_at.isoformat(), measurements[-1].measured_at.isoformat())
    readme = _readme(summary, seed, span, story)
    (out_dir / "README.md").write_text(readme, encoding="utf-8")
    return summary


def main() -> None:
    """Regenerate the committed ``app/demo/sample_data/`` (shipped in the wheel)."""
    out_dir = Path(__file__).resolve().parent / "sample_data"
    summary = generate(out_dir)
    print(f"{out_dir}: {summary.panels} panels, {summary.rows} rows")


if __name__ == "__main__":
    main()
